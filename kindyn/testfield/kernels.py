"""Scale dependence: fit of a Lorentzian kernel to a coefficient measured at several K.

Form used (the SOCA kernel of a single-wavenumber flow, Brandenburg, Rädler & Schrinner 2008,
A&A 482, 739)::

    c(K) = c_0 / (1 + (K/k_c)^2)

for ``c = alpha`` (in-plane mean of the diagonal, ``(alpha_pp + alpha_qq)/2``) and ``c = eta_t``
(``(eta_pp + eta_qq)/2``). With two or more K both ``c_0`` and ``k_c`` are fitted (nonlinear least
squares started from the exact linear fit of ``1/c = 1/c_0 + K^2/(c_0 k_c^2)``); with a single K,
``k_c`` is fixed to the flow wavenumber ``k_f`` and only ``c_0`` is fitted. In SOCA for a steady
single-wavenumber flow every Fourier mode of ``b`` has ``|k|^2 = k_f^2 + K^2``, so the form is
exact there with ``k_c = k_f``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

FORM = "c(K) = c_0 / (1 + (K/k_c)^2)"


@dataclass(frozen=True)
class LorentzianFit:
    """``c_0``, ``k_c``, whether ``k_c`` was fixed, and the rms relative misfit."""

    c0: float
    kc: float
    kc_fixed: bool
    rms_relative_misfit: float
    form: str = FORM

    def __call__(self, K):
        return self.c0 / (1.0 + (np.asarray(K, float) / self.kc) ** 2)

    def as_dict(self) -> dict:
        return {"c0": self.c0, "kc": self.kc, "kc_fixed": self.kc_fixed,
                "rms_relative_misfit": self.rms_relative_misfit, "form": self.form}


def fit_lorentzian(K, values, k_f: float) -> LorentzianFit:
    """Fit :data:`FORM` to ``values`` at wavenumbers ``K`` (see module docstring)."""
    K = np.asarray(K, float)
    c = np.asarray(values, float)
    if K.size == 0 or not np.all(np.isfinite(c)):
        return LorentzianFit(math.nan, math.nan, True, math.nan)
    if K.size == 1 or np.all(c == 0):
        kc = float(k_f)
        c0 = float(c[0] * (1 + (K[0] / kc) ** 2)) if K.size == 1 else 0.0
        return LorentzianFit(c0, kc, True, _misfit(K, c, c0, kc))
    start = _linear_start(K, c, k_f)

    def residual(p):
        c0, log_kc = p
        return c0 / (1 + (K / math.exp(log_kc)) ** 2) - c

    fit = least_squares(residual, x0=[start[0], math.log(start[1])], xtol=1e-15, ftol=1e-15, gtol=1e-15)
    c0, kc = float(fit.x[0]), float(math.exp(fit.x[1]))
    return LorentzianFit(c0, kc, False, _misfit(K, c, c0, kc))


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
