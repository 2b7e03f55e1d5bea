"""Figures of test-field results (matplotlib, on an Agg canvas): alpha and eta_t versus K with SOCA, the
other averaging directions and the pumping; and the closure across scales (growth rates versus K).

Plain arrays in, a figure file out (written atomically by :func:`kindyn.output.figures.save`, in the
case's figure style). Cautions are tags above the axes or a note along the bottom, never on the data.
"""

from __future__ import annotations

import numpy as np

from kindyn.output.figures import FigureStyle, note as add_note, save, status_tags, styled_figure

CAUTION = "SOCA valid only at small Rm or short correlation time"
MARKERS = {"x": "^", "y": "v", "z": "o"}


def _errorbar(ax, x, y, err, **kw):
    err = None if err is None or not np.any(np.isfinite(err)) else np.nan_to_num(np.asarray(err, float), nan=0.0)
    ax.errorbar(x, y, yerr=err, capsize=3, **kw)


def coefficients_versus_K(path, K, alpha, alpha_err, eta_t, eta_t_err, alpha_soca, eta_t_soca, title,
                          fits=None, note: str = "", alpha_uniform=(None, None), other_directions=None,
                          gamma=None, converged=None, style: FigureStyle | None = None) -> None:
    """Panels alpha(K) and eta_t(K) (full, with error bars) beside SOCA and the fitted kernels, and
    gamma_s(K) when ``gamma`` is given.

    ``fits`` (optional) maps ``"alpha"``, ``"eta_t"``, ``"alpha_soca"``, ``"eta_t_soca"`` to callables
    ``K -> value`` drawn as lines. ``alpha_uniform``: ``(full, SOCA)`` in-plane alpha of the uniform
    test fields (None when not computed), drawn at K = 0. ``other_directions``: ``{"x": (alpha,
    alpha_err, eta_t, eta_t_err, alpha_soca, eta_t_soca), ...}`` of the other averaging directions.
    ``gamma``: ``(gamma_K (nK, 3), errors, SOCA)`` drawn per component (NaN where not computed).
    """
    K = np.asarray(K, float)
    panels = 3 if gamma is not None else 2
    fig = styled_figure(style, (3.6 * panels, 3.4))
    axes = fig.subplots(1, panels)
    fine = np.linspace(0.0, K.max() * 1.1, 200)
    for ax, name, full, err, soca, label in ((axes[0], "alpha", alpha, alpha_err, alpha_soca, r"$\alpha(K)$"),
                                             (axes[1], "eta_t", eta_t, eta_t_err, eta_t_soca, r"$\eta_t(K)$")):
        _errorbar(ax, K, full, err, fmt="o", color="C0", label="test fields (full)")
        ax.plot(K, soca, "s", mfc="none", color="C3", label="SOCA")
        for d, values in (other_directions or {}).items():
            v, e = (values[0], values[1]) if name == "alpha" else (values[2], values[3])
            _errorbar(ax, K, v, e, fmt=MARKERS.get(d, "x"), mfc="none", color="C2", ms=5,
                      label=f"full, averages along {d}")
        if name == "alpha":
            for value, color, text in ((alpha_uniform[0], "C0", "uniform fields (K = 0)"),
                                       (alpha_uniform[1], "C3", "uniform fields, SOCA")):
                if value is not None and np.isfinite(value):
                    ax.plot([0.0], [value], "D", mfc="none" if color == "C3" else color, color=color, label=text)
        if fits:
            for key, lstyle, color in ((name, "-", "C0"), (name + "_soca", "--", "C3")):
                if fits.get(key) is not None:
                    ax.plot(fine, fits[key](fine), lstyle, color=color, lw=1.0,
                            label="Lorentzian fit" + (" (SOCA)" if key.endswith("soca") else ""))
        ax.axhline(0.0, color="0.7", lw=0.6)
        ax.set_xlabel("test-field wavenumber $K$ (case units)")
        ax.set_ylabel(label + " (case units)")
        ax.legend(fontsize=6.5, loc="best")
    if gamma is not None:
        g, ge, gs = (np.asarray(a, float) if a is not None else None for a in gamma)
        ax = axes[2]
        for s, d in enumerate("xyz"):
            if np.all(np.isnan(g[:, s])):
                continue
            _errorbar(ax, K, g[:, s], None if ge is None else ge[:, s], fmt=MARKERS[d], color=f"C{s}",
                      label=rf"$\gamma_{d}(K)$ (averages along {d})")
            if gs is not None:
                ax.plot(K, gs[:, s], MARKERS[d], mfc="none", color="C3", ms=5,
                        label="SOCA" if s == 0 or np.all(np.isnan(g[:, :s])) else None)
        ax.axhline(0.0, color="0.7", lw=0.6)
        scale = float(np.nanmax(np.abs(np.concatenate([np.ravel(alpha), np.ravel(alpha_soca)]))))
        if np.isfinite(scale) and scale > 0 and not np.nanmax(np.abs(g)) > 1e-3 * scale:
            ax.set_ylim(-0.1 * scale, 0.1 * scale)  # round-off: do not blow it up to fill the panel
            ax.text(0.5, 0.9, r"$|\gamma| < 10^{-3}|\alpha|$", transform=ax.transAxes, ha="center", fontsize=7)
        ax.set_xlabel("test-field wavenumber $K$ (case units)")
        ax.set_ylabel(r"pumping $\gamma_s(K) = -\epsilon_{spq}(\alpha_{pq} - \alpha_{qp})/2$")
        ax.legend(fontsize=6.5, loc="best")
    if converged is not None:
        status_tags(axes[0], converged, note.replace("NOT converged: ", ""))
    fig.suptitle(title, fontsize=9.5)
    add_note(fig, "caution: " + CAUTION + ("; " + note if note else ""), color="#b2182b")
    save(fig, path, style)


def closure_figure(path, K, direct, direct_err, predictions: dict, title: str, note: str = "",
                   style: FigureStyle | None = None) -> None:
    """Left: growth rates ``p(K)`` of the direct runs (with error bars) and of each closure
    (``predictions``: label -> (values, errors or None)); right: their relative differences
    ``(p - p_direct)/|p_direct|``."""
    K = np.asarray(K, float)
    fig = styled_figure(style, (8.0, 3.4))
    left, right = fig.subplots(1, 2)
    d, de = np.asarray(direct, float), np.asarray(direct_err, float)
    _errorbar(left, K, d, de, fmt="ko", ms=6, label="direct runs")
    for n, (label, (values, errors)) in enumerate(predictions.items()):
        v = np.asarray(values, float)
        _errorbar(left, K, v, errors, fmt="sDv^<>"[n % 6], mfc="none", color=f"C{n}", ms=5, label=label)
        with np.errstate(divide="ignore", invalid="ignore"):
            rel = (v - d) / np.abs(d)
        right.plot(K, rel, "sDv^<>"[n % 6], mfc="none", color=f"C{n}", ms=5, label=label)
    left.axhline(0.0, color="0.7", lw=0.6)
    right.axhline(0.0, color="0.7", lw=0.6)
    left.set_xlabel("mean-field wavenumber $K$ (case units)")
    left.set_ylabel("growth rate $p(K)$ (case units)")
    right.set_xlabel("mean-field wavenumber $K$ (case units)")
    right.set_ylabel(r"$(p - p_{\mathrm{direct}})/|p_{\mathrm{direct}}|$")
    left.legend(fontsize=6.5, loc="best")
    fig.suptitle(title, fontsize=9.5)
    add_note(fig, note)
    save(fig, path, style)
