"""Figures of test-field results (matplotlib, on an Agg canvas): alpha and eta_t versus K, with SOCA.

Plain arrays in, a PNG out (written atomically by :func:`kindyn.output.figures.save`).
"""

from __future__ import annotations

import numpy as np

from kindyn.output.figures import new_figure, save

CAUTION = "SOCA valid only at small Rm or short correlation time"


def _errorbar(ax, x, y, err, **kw):
    err = None if err is None or not np.any(np.isfinite(err)) else np.nan_to_num(np.asarray(err, float), nan=0.0)
    ax.errorbar(x, y, yerr=err, capsize=3, **kw)


def coefficients_versus_K(path, K, alpha, alpha_err, eta_t, eta_t_err, alpha_soca, eta_t_soca, title,
                          fits=None, note: str = "", alpha_uniform=(None, None)) -> None:
    """Two panels: alpha(K) and eta_t(K) (full, with error bars) beside SOCA, and fitted kernels.

    ``fits`` (optional) maps ``"alpha"``, ``"eta_t"``, ``"alpha_soca"``, ``"eta_t_soca"`` to callables
    ``K -> value`` drawn as lines. ``alpha_uniform``: ``(full, SOCA)`` in-plane alpha of the uniform
    test fields (None when not computed), drawn at K = 0 (the kernel fits of alpha pass through it).
    """
    K = np.asarray(K, float)
    fig = new_figure(figsize=(9.6, 3.8))
    axes = fig.subplots(1, 2)
    fine = np.linspace(0.0, K.max() * 1.1, 200)
    for ax, name, full, err, soca, label in ((axes[0], "alpha", alpha, alpha_err, alpha_soca, r"$\alpha$"),
                                             (axes[1], "eta_t", eta_t, eta_t_err, eta_t_soca, r"$\eta_t$")):
        _errorbar(ax, K, full, err, fmt="o", color="C0", label="test fields (full)")
        ax.plot(K, soca, "s", mfc="none", color="C3", label="SOCA")
        if name == "alpha":
            for value, marker, color, text in ((alpha_uniform[0], "D", "C0", "uniform fields (K = 0)"),
                                               (alpha_uniform[1], "D", "C3", "uniform fields, SOCA")):
                if value is not None and np.isfinite(value):
                    ax.plot([0.0], [value], marker, mfc="none" if color == "C3" else color, color=color, label=text)
        if fits:
            for key, style, color in ((name, "-", "C0"), (name + "_soca", "--", "C3")):
                if fits.get(key) is not None:
                    ax.plot(fine, fits[key](fine), style, color=color, lw=1.0,
                            label="Lorentzian fit" + (" (SOCA)" if key.endswith("soca") else ""))
        ax.axhline(0.0, color="0.7", lw=0.6)
        ax.set_xlabel("K")
        ax.set_ylabel(label)
        ax.legend(fontsize=8, loc="best")
    fig.suptitle(title, fontsize=10)
    fig.text(0.01, -0.02, CAUTION + ("; " + note if note else ""), fontsize=8, color="C3")
    save(fig, path)

