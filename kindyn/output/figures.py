"""Figures (matplotlib only in output/figures*.py). Each function takes plain arrays and a path.

No pyplot and no global backend: every figure is a :class:`matplotlib.figure.Figure` drawn on its
own Agg canvas (:func:`new_figure`). Importing kindyn therefore never switches the backend of a
notebook or of a user's script, and no figure stays registered anywhere (nothing to close).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure


def new_figure(**options) -> Figure:
    """A figure (``options`` as for :class:`~matplotlib.figure.Figure`) on its own Agg canvas."""
    fig = Figure(**options)
    FigureCanvasAgg(fig)
    return fig


def save(fig, path) -> None:
    """Write atomically (temporary name, then rename)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    partial = path.with_name(path.stem + ".part" + path.suffix)
    fig.savefig(partial, dpi=120, bbox_inches="tight")
    os.replace(partial, path)


def growth_figure(path, times, log_energy, growth_rate, error, window, title, warning="") -> None:
    """ln E_M versus time with the fitted slope 2 gamma over the fit window."""
    fig = new_figure(figsize=(6.4, 4.0))
    ax = fig.subplots()
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
