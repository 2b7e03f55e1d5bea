"""Closure check: the mean-field growth rate of the box-scale mode beside a direct run.

Mean-field induction for planar averages along ``s`` (design.md section 1), a mean field
``Bbar = (B_p, B_q)(s) e^{iKs + pt}`` and the measured in-plane tensors (``2 x 2`` blocks of
``alpha_ij`` and ``eta_ij``; the mean flow drops out: ``Ubar x Bbar`` is along ``s`` and has no
curl)::

    p Bbar = iK J (alpha - iK eta J) Bbar - eta K^2 Bbar,      J = e_s x (.)  in the plane.

For isotropic in-plane tensors (``alpha I``, ``eta_t I``) the eigenvalues are
``p = +-alpha K - (eta + eta_t) K^2``; the growing one belongs to the Beltrami field whose helicity
has the sign of ``-alpha``::

    p = |alpha| K - (eta + eta_t) K^2.

:func:`mean_field_growth_rate` gives this formula (``alpha``, ``eta_t`` = in-plane means of the
diagonals) and :func:`anisotropic_growth_rate` the largest real part of the 2 x 2 problem. The
direct run (kindyn run) measures the fastest-growing mode of the box; it is the box-scale mean
field only when that mode dominates, so the share of its energy in the box-scale planar mean is
reported beside it. The test-field coefficients are those of a steady (zero-frequency) response:
the comparison is sharp near onset (small ``p``) and needs scale separation (``k_f >= 2 K``).
"""

from __future__ import annotations

import math

import numpy as np

from kindyn.testfield.fields import mean_mode_mask


def mean_field_growth_rate(alpha: float | None, eta_t: float | None, eta: float, K: float) -> float:
    """``p = |alpha| K - (eta + eta_t) K^2``; NaN (not available) when ``alpha`` or ``eta_t`` is None."""
    if alpha is None or eta_t is None:
        return math.nan
    return abs(alpha) * K - (eta + eta_t) * K ** 2


def anisotropic_growth_rate(alpha: np.ndarray, eta_tensor: np.ndarray, eta: float, K: float, axis: int) -> complex:
    """Eigenvalue with the largest real part of the in-plane mean-field problem (module docstring).

    ``alpha`` and ``eta_tensor`` are the ``3 x 2`` planar results (rows x, y, z; columns p, q); NaN
    (not available, e.g. a calibration that did not converge) when an entry used is not finite.
    """
    perp = [j for j in range(3) if j != axis]
    A = np.asarray(alpha, float)[perp, :]
    H = np.asarray(eta_tensor, float)[perp, :]
    if not (np.all(np.isfinite(A)) and np.all(np.isfinite(H))):
        return complex(math.nan, math.nan)
    e_s = np.eye(3)[axis]
    J = np.array([[np.cross(e_s, np.eye(3)[perp[c]])[perp[r]] for c in range(2)] for r in range(2)])
    M = 1j * K * J @ (A - 1j * K * H @ J) - eta * K ** 2 * np.eye(2)
    values = np.linalg.eigvals(M)
    return complex(values[np.argmax(values.real)])


def box_scale_mean_share(b_hat: np.ndarray, layout, axis: int) -> float:
    """Share of ``<|B|^2>`` in the planar-mean modes ``m_s = +-1`` along ``axis`` (``layout`` holds ``b_hat``)."""
    w = layout.parseval_weights
    density = w * sum(c.real ** 2 + c.imag ** 2 for c in b_hat)
    total = float(layout.total(density.sum()))
    m = layout.mode_numbers[axis]
    pick = mean_mode_mask(layout, axis) & np.broadcast_to(np.abs(m) == 1, layout.spectral_shape)
    return float(layout.total(density[pick].sum())) / total if total > 0 else math.nan


def closure_report(alpha: float, eta_t: float, alpha_tensor, eta_tensor, eta: float, K: float, axis: int,
                   k_f: float, direct_rate: float | None, direct_error: float | None, mean_share: float | None) -> dict:
    """Everything the closure check reports (plain numbers; JSON-ready)."""
    p = mean_field_growth_rate(alpha, eta_t, eta, K)
    p_aniso = anisotropic_growth_rate(alpha_tensor, eta_tensor, eta, K, axis)
    out = {
        "K": K, "alpha": alpha, "eta_t": eta_t,
        "mean_field_growth_rate": p,
        "mean_field_growth_rate_anisotropic": p_aniso.real,
        "mean_field_frequency_anisotropic": abs(p_aniso.imag),
        "direct_growth_rate": direct_rate,
        "direct_growth_rate_error": direct_error,
        "direct_box_scale_mean_share": mean_share,
        "scale_separation": k_f / K,
        "relative_difference": None,
        "caution": "",
    }
    if direct_rate is not None and math.isfinite(direct_rate) and direct_rate != 0:
        out["relative_difference"] = abs(p - direct_rate) / abs(direct_rate)
    notes = []
    if k_f / K < 2:
        notes.append(f"no scale separation (k_f/K = {k_f / K:.3g} < 2): mean-field theory is not expected to hold")
    if mean_share is not None and math.isfinite(mean_share) and mean_share < 0.5:
        notes.append(f"the direct run's mode has only {mean_share:.2g} of its energy in the box-scale mean field: "
                     "it may not be the same mode")
    out["caution"] = "; ".join(notes)
    return out
