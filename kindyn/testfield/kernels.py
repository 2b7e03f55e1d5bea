"""Scale dependence: fit of a Lorentzian kernel to a coefficient measured at several K.

Form used (the SOCA kernel of a single-wavenumber flow, Brandenburg, Rädler & Schrinner 2008,
A&A 482, 739)::

    c(K) = c_0 / (1 + (K/k_c)^2)

for ``c = alpha`` (in-plane mean of the diagonal, ``(alpha_pp + alpha_qq)/2``) and ``c = eta_t``
(``(eta_pp + eta_qq)/2``). In SOCA for a steady single-wavenumber flow every Fourier mode of ``b``
has ``|k|^2 = k_f^2 + K^2``, so the form is exact there with ``k_c = k_f``, and ``c_0`` is the value
of the uniform test fields (``K = 0``).

Which parameters are fitted (the fit says so in ``fixed`` and ``note``):

* when the value at ``K = 0`` is known (``c0``: for alpha, the in-plane mean of the diagonal of the
  uniform-field alpha tensor), ``c_0`` is fixed to it and only ``k_c`` is fitted: with one K
  exactly, ``k_c = K / sqrt(c_0/c(K) - 1)`` (no Lorentzian exists unless ``0 < c(K)/c_0 < 1``:
  then ``k_c`` is NaN and the note says why); with more, by least squares in ``ln k_c``;
* otherwise, with two or more K, both ``c_0`` and ``k_c`` are fitted (nonlinear least squares
  started from the exact linear fit of ``1/c = 1/c_0 + K^2/(c_0 k_c^2)``); with a single K,
  ``k_c`` is fixed to the flow wavenumber ``k_f`` and only ``c_0`` is fitted.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

FORM = "c(K) = c_0 / (1 + (K/k_c)^2)"

NOTE_BOTH = "c_0 and k_c fitted"
NOTE_KC_FIXED = "single K: k_c fixed to the flow wavenumber k_f = {k_f:g}, c_0 fitted"
NOTE_C0_FIXED = "c_0 fixed to the value at K = 0 ({source}), k_c fitted"
NOTE_NO_LORENTZIAN = ("c_0 fixed to the value at K = 0 ({source}); no Lorentzian with this c_0 passes through "
                      "c(K = {K:g}) = {c:.4g} (c(K)/c_0 = {ratio:.3g} is not between 0 and 1): k_c undefined")


@dataclass(frozen=True)
class LorentzianFit:
    """``c_0``, ``k_c``, which of them was fixed, the rms relative misfit and a note saying how."""

    c0: float
    kc: float
    kc_fixed: bool
    rms_relative_misfit: float
    form: str = FORM
    c0_fixed: bool = False
    note: str = ""

    def __call__(self, K):
        return self.c0 / (1.0 + (np.asarray(K, float) / self.kc) ** 2)

    @property
    def fixed(self) -> list[str]:
        return [name for name, flag in (("c0", self.c0_fixed), ("kc", self.kc_fixed)) if flag]

    def as_dict(self) -> dict:
        return {"c0": self.c0, "kc": self.kc, "kc_fixed": self.kc_fixed, "c0_fixed": self.c0_fixed,
                "fixed": self.fixed, "note": self.note, "rms_relative_misfit": self.rms_relative_misfit,
                "form": self.form}


def fit_lorentzian(K, values, k_f: float, c0: float | None = None,
                   c0_source: str = "uniform test fields") -> LorentzianFit:
    """Fit :data:`FORM` to ``values`` at wavenumbers ``K`` (see module docstring).

    ``c0``: the coefficient at ``K = 0`` when it was computed (then fixed), else None;
    ``c0_source`` names where it comes from in the fit's note.
    """
    K = np.asarray(K, float)
    c = np.asarray(values, float)
    if K.size == 0 or not np.all(np.isfinite(c)):
        return LorentzianFit(math.nan, math.nan, True, math.nan)
    if c0 is not None and math.isfinite(c0):
        return _fit_kc(K, c, float(c0), k_f, c0_source)
    if K.size == 1 or np.all(c == 0):
        kc = float(k_f)
        c0 = float(c[0] * (1 + (K[0] / kc) ** 2)) if K.size == 1 else 0.0
        return LorentzianFit(c0, kc, True, _misfit(K, c, c0, kc), note=NOTE_KC_FIXED.format(k_f=kc))
    start = _linear_start(K, c, k_f)

    def residual(p):
        c0, log_kc = p
        return c0 / (1 + (K / math.exp(log_kc)) ** 2) - c

    fit = least_squares(residual, x0=[start[0], math.log(start[1])], xtol=1e-15, ftol=1e-15, gtol=1e-15)
    c0, kc = float(fit.x[0]), float(math.exp(fit.x[1]))
    return LorentzianFit(c0, kc, False, _misfit(K, c, c0, kc), note=NOTE_BOTH)


def _fit_kc(K, c, c0: float, k_f: float, source: str) -> LorentzianFit:
    """``k_c`` with ``c_0`` fixed (module docstring)."""
    note = NOTE_C0_FIXED.format(source=source)
    ratios = c / c0 if c0 != 0 else np.full_like(c, math.nan)
    ok = np.isfinite(ratios) & (ratios > 0) & (ratios < 1) & (K > 0)
    if K.size == 1:
        if not ok[0]:
            return LorentzianFit(c0, math.nan, False, math.nan, c0_fixed=True,
                                 note=NOTE_NO_LORENTZIAN.format(source=source, K=K[0], c=c[0], ratio=ratios[0]))
        kc = float(K[0] / math.sqrt(1.0 / ratios[0] - 1.0))
        return LorentzianFit(c0, kc, False, _misfit(K, c, c0, kc), c0_fixed=True, note=note)
    # start: the median of the single-point values k_c(K_i) where they exist, else k_f
    start = float(np.median(K[ok] / np.sqrt(1.0 / ratios[ok] - 1.0))) if np.any(ok) else float(k_f)

    def residual(p):
        return c0 / (1 + (K / math.exp(p[0])) ** 2) - c

    fit = least_squares(residual, x0=[math.log(start)], xtol=1e-15, ftol=1e-15, gtol=1e-15)
    kc = float(math.exp(fit.x[0]))
    return LorentzianFit(c0, kc, False, _misfit(K, c, c0, kc), c0_fixed=True, note=note)


def _linear_start(K, c, k_f):
    """``1/c = a + b K^2`` by least squares -> ``c_0 = 1/a``, ``k_c = sqrt(a/b)`` (fallback ``k_f``)."""
    if np.all(c != 0) and np.all(np.sign(c) == np.sign(c[0])):
        A = np.stack([np.ones_like(K), K ** 2], axis=1)
        (a, b), *_ = np.linalg.lstsq(A, 1.0 / c, rcond=None)
        if a != 0 and b != 0 and a / b > 0:
            return 1.0 / a, math.sqrt(a / b)
    return float(c[0] * (1 + (K[0] / k_f) ** 2)), float(k_f)


def _misfit(K, c, c0, kc) -> float:
    model = c0 / (1 + (K / kc) ** 2)
    scale = max(float(np.max(np.abs(c))), 1e-300)
    return float(np.sqrt(np.mean((model - c) ** 2)) / scale)
