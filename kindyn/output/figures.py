"""Figures (matplotlib, Agg backend, only here). Each function takes plain arrays and a path."""

from __future__ import annotations

import os
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402


def save(fig, path) -> None:
    """Write atomically (temporary name, then rename) and close the figure."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    partial = path.with_name(path.stem + ".part" + path.suffix)
    fig.savefig(partial, dpi=120, bbox_inches="tight")
    plt.close(fig)
    os.replace(partial, path)


def growth_figure(path, times, log_energy, growth_rate, error, window, title, warning="") -> None:
    """ln E_M versus time with the fitted slope 2 gamma over the fit window."""
    fig, ax = plt.subplots(figsize=(6.4, 4.0))
    ax.plot(times, log_energy, lw=1.0, color="0.2", label=r"$\ln E_M$")
    if growth_rate is not None and np.isfinite(growth_rate):
        t0, t1 = window
        sel = (np.asarray(times) >= t0)
        tt = np.asarray(times)[sel]
        if tt.size:
            y0 = float(np.mean(np.asarray(log_energy)[sel] - 2 * growth_rate * tt))
            ax.plot(tt, y0 + 2 * growth_rate * tt, "--", color="C3",
                    label=rf"fit: $\gamma$ = {growth_rate:.5g} $\pm$ {error:.2g}")
    ax.set_xlabel("time")
    ax.set_ylabel(r"$\ln E_M$")
    ax.set_title(title, fontsize=10)
    if warning:
        ax.text(0.02, 0.02, warning, transform=ax.transAxes, fontsize=8, color="C3", va="bottom")
    ax.legend(loc="best", fontsize=9)
    save(fig, path)
