"""Figure of a sweep: growth rate versus the swept parameter (matplotlib, on an Agg canvas).

Error bars are the growth-rate uncertainties; the zero line separates growth from decay; critical
values (sign changes of gamma) are marked with their uncertainty as a shaded band. Unconverged
points are drawn hollow, points flagged as possibly under-resolved are ringed in red, failed points
are listed in the corner (they have no growth rate).
"""

from __future__ import annotations

import numpy as np

from kindyn.output.figures import new_figure, save


def sweep_figure(path, curves, critical, xlabel, title, log_x=False, tick_labels=None) -> None:
    """Write the figure to ``path`` atomically.

    ``curves``: list of dicts with ``label``, ``x``, ``gamma``, ``error``, ``status``, ``warning``
    and optionally ``refinement`` (equal-length lists; NaN gamma for failed or pending points;
    refinement runs are drawn as diamonds); ``critical``: list of
    dicts with ``value``, ``uncertainty`` and ``direction``; ``tick_labels``: text per x position
    for a sweep without a numeric key.
    """
    fig = new_figure(figsize=(6.8, 4.2))
    ax = fig.subplots()
    ax.axhline(0.0, color="0.4", lw=0.8, zorder=1)
    failed = 0
    for n, curve in enumerate(curves):
        x = np.asarray(curve["x"], float)
        g = np.asarray(curve["gamma"], float)
        e = np.asarray(curve["error"], float)
        status = np.asarray(curve["status"], object)
        warned = np.asarray(curve["warning"], bool)
        ok = np.isfinite(g)
        failed += int(np.count_nonzero(~ok & (status == "failed")))
        order = np.argsort(x[ok])
        color = f"C{n % 10}"
        ax.plot(x[ok][order], g[ok][order], "-", color=color, lw=1.0, label=curve["label"] or None)
        e_plot = np.where(np.isfinite(e), e, 0.0)
        conv = ok & (status == "converged")
        ax.errorbar(x[conv], g[conv], yerr=e_plot[conv], fmt="o", ms=4, color=color, capsize=2)
        unconv = ok & (status != "converged")
        if unconv.any():
            ax.errorbar(x[unconv], g[unconv], yerr=e_plot[unconv], fmt="o", ms=5, mfc="none", color=color,
                        capsize=2, label="not converged" if n == 0 else None)
        refined = ok & np.asarray(curve.get("refinement", [False] * x.size), bool)
        if refined.any():
            ax.plot(x[refined], g[refined], "D", ms=4, color=color, label="refinement run" if n == 0 else None)
        if (warned & ok).any():
            ax.plot(x[warned & ok], g[warned & ok], "o", ms=10, mfc="none", mec="C3",
                    label="possibly under-resolved" if n == 0 else None)
    for c in critical:
        v, u = c["value"], c["uncertainty"]
        ax.axvline(v, color="C3", lw=0.8, ls="--")
        if np.isfinite(u) and u > 0:
            ax.axvspan(v - u, v + u, color="C3", alpha=0.12, lw=0)
        ax.text(v, 0.03, f" {v:.4g} ± {u:.2g}", transform=ax.get_xaxis_transform(), fontsize=8, color="C3",
                rotation=90, va="bottom", ha="right")
    if log_x:
        ax.set_xscale("log")
    if tick_labels is not None:
        ax.set_xticks(range(len(tick_labels)))
        ax.set_xticklabels(tick_labels, fontsize=7)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(r"growth rate $\gamma$")
    ax.set_title(title, fontsize=10)
    if failed:
        ax.text(0.02, 0.02, f"{failed} failed point(s) not shown", transform=ax.transAxes, fontsize=8, color="C3")
    handles, labels = ax.get_legend_handles_labels()
    if labels:
        ax.legend(loc="best", fontsize=8)
    save(fig, path)
