"""Figures of ``kindyn flow`` (matplotlib through :mod:`kindyn.output.figures`).

Left: the energy spectrum ``E_s`` and ``|H_s|/(2 k_s)`` on log axes (realisability: ``|H| <= 2 k E``,
so the two curves touch where the flow is maximally helical; filled markers where ``H_s > 0``,
open where ``H_s < 0``). Right: the relative helicity per shell ``H_s/(2 k_s E_s)`` in [-1, 1].
Shell sums: ``sum_s E_s = <|u|^2>/2``, ``sum_s H_s = <u . omega>``. Cautions go along the bottom,
inside the figure.
"""

from __future__ import annotations

import numpy as np

from kindyn.output.figures import FigureStyle, note as add_note, save, styled_figure


def flow_spectra_figure(path, wavenumbers, energy, helicity, title: str, note: str = "", *,
                        style: FigureStyle | None = None) -> None:
    k = np.asarray(wavenumbers, float)
    E = np.asarray(energy, float)
    H = np.asarray(helicity, float)
    peak = E.max() if E.size else 0.0
    shown = (k > 0) & (E > 1e-14 * max(peak, 1e-300))
    fig = styled_figure(style, (8.0, 3.6))
    left, right = fig.subplots(1, 2)
    left.loglog(k[shown], E[shown], "-o", ms=3, color="0.2", label=r"$E(k)$, $\sum E = \langle|\mathbf{u}|^2\rangle/2$")
    scaled = np.abs(H[shown]) / (2 * k[shown])
    positive = H[shown] > 0
    left.loglog(k[shown][positive], scaled[positive], "^", ms=4, color="C3", label=r"$|H(k)|/2k$, $H>0$")
    left.loglog(k[shown][~positive & (scaled > 0)], scaled[~positive & (scaled > 0)], "v", ms=4, mfc="none",
                color="C0", label=r"$|H(k)|/2k$, $H<0$")
    left.set_xlabel(r"shell wavenumber $k$ (case units)")
    left.set_ylabel(r"per shell: $E(k)$, $|H(k)|/2k$")
    left.legend(fontsize=7, loc="best")
    relative = np.divide(H[shown], 2 * k[shown] * E[shown])
    right.plot(k[shown], relative, "-o", ms=3, color="C3")
    right.axhline(0.0, color="0.6", lw=0.8)
    right.set_ylim(-1.05, 1.05)
    right.set_xscale("log")
    right.set_xlabel(r"shell wavenumber $k$ (case units)")
    right.set_ylabel(r"relative helicity $H(k)/(2kE(k))$")
    fig.suptitle(title, fontsize=9.5)
    if note:
        add_note(fig, "caution: " + note, color="#b2182b")
    save(fig, path, style)
