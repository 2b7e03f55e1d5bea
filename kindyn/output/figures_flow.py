"""Figures of ``kindyn flow`` (matplotlib through :mod:`kindyn.output.figures`).

Left: the energy spectrum ``E_s`` and ``|H_s|/(2 k_s)`` on log axes (realisability: ``|H| <= 2 k E``,
so the two curves touch where the flow is maximally helical; filled markers where ``H_s > 0``,
open where ``H_s < 0``). Right: the relative helicity per shell ``H_s/(2 k_s E_s)`` in [-1, 1].
"""

from __future__ import annotations

import numpy as np

from kindyn.output.figures import new_figure, save


def flow_spectra_figure(path, wavenumbers, energy, helicity, title: str, note: str = "") -> None:
    k = np.asarray(wavenumbers, float)
    E = np.asarray(energy, float)
    H = np.asarray(helicity, float)
    peak = E.max() if E.size else 0.0
    shown = (k > 0) & (E > 1e-14 * max(peak, 1e-300))
    fig = new_figure(figsize=(9.6, 3.8), layout="constrained")
    left, right = fig.subplots(1, 2)
    left.loglog(k[shown], E[shown], "-o", ms=3, color="0.2", label=r"$E(k)$")
    scaled = np.abs(H[shown]) / (2 * k[shown])
    positive = H[shown] > 0
    left.loglog(k[shown][positive], scaled[positive], "^", ms=4, color="C3", label=r"$|H(k)|/2k$, $H>0$")
    left.loglog(k[shown][~positive & (scaled > 0)], scaled[~positive & (scaled > 0)], "v", ms=4, mfc="none",
                color="C0", label=r"$|H(k)|/2k$, $H<0$")
    left.set_xlabel(r"shell wavenumber $k$")
    left.set_ylabel("per shell")
    left.legend(fontsize=8, loc="best")
    relative = np.divide(H[shown], 2 * k[shown] * E[shown])
    right.plot(k[shown], relative, "-o", ms=3, color="C3")
    right.axhline(0.0, color="0.6", lw=0.8)
    right.set_ylim(-1.05, 1.05)
    right.set_xscale("log")
    right.set_xlabel(r"shell wavenumber $k$")
    right.set_ylabel(r"$H(k)/(2kE(k))$")
    fig.suptitle(title, fontsize=10)
    if note:
        fig.text(0.01, -0.02, note, fontsize=8, color="C3", va="top")
    save(fig, path)
