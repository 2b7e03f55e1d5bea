"""Integrating-factor (Lawson) Runge–Kutta stepping of ``dy/dt = N(t, y) - r * y``.

``r`` is a real array of decay rates (diagonal linear part, integrated exactly) and ``N`` any
right-hand side ``N(t, y, out)``. With ``E(s) = exp(-r s)`` one step of a tableau ``(a, b, c)`` is

    Y_i     = E(c_i h) y_n + h sum_{j<i} a_ij E((c_i - c_j) h) K_j,     K_i = N(t_n + c_i h, Y_i)
    y_{n+1} = E(h) y_n + h sum_i b_i E((1 - c_i) h) K_i

so stage times are ``t_n + c_i h`` (correct for time-dependent ``N``) and ``N = 0`` is integrated
exactly. This module knows nothing about magnetism.
"""

from __future__ import annotations

import numpy as np

from kindyn.stepping.tableaux import Tableau


class IntegratingFactorStepper:
    """Advance ``y`` (complex array, modified in place) by one step of size ``h``."""

    def __init__(self, rhs, decay_rates: np.ndarray, tableau: Tableau, shape, dtype):
        self.rhs, self.rates, self.tableau = rhs, decay_rates, tableau
        self._stages = [np.empty(shape, dtype) for _ in range(tableau.stages)]
        self._stage_value = np.empty(shape, dtype)
        self._scratch = np.empty(shape, dtype)
        self._h = None
        self._factors: dict[float, np.ndarray] = {}

    def _exponentials(self, h: float) -> dict[float, np.ndarray]:
        if h != self._h:
            tab = self.tableau
            offsets = {1.0} | {1.0 - ci for ci in tab.c} | set(tab.c)
            offsets |= {ci - cj for i, ci in enumerate(tab.c) for cj in tab.c[:i]}
            self._factors = {s: np.exp(-self.rates * (s * h)) for s in offsets if s != 0.0}
            self._h = h
        return self._factors

    def _add_scaled(self, target, factor, k, weight):
        """``target += weight * factor * k`` with one scratch buffer (``factor`` None means 1)."""
        if factor is None:
            np.multiply(k, weight, out=self._scratch)
        else:
            np.multiply(k, factor, out=self._scratch)
            self._scratch *= weight
        target += self._scratch

    def step(self, t: float, y: np.ndarray, h: float) -> None:
        tab, E = self.tableau, self._exponentials(h)
        K, Y = self._stages, self._stage_value
        for i in range(tab.stages):
            if tab.c[i] == 0.0:
                np.copyto(Y, y)
            else:
                np.multiply(y, E[tab.c[i]], out=Y)
            for j, aij in enumerate(tab.a[i]):
                if aij != 0.0:
                    self._add_scaled(Y, E.get(tab.c[i] - tab.c[j]), K[j], h * aij)
            self.rhs(t + tab.c[i] * h, Y, K[i])
        y *= E[1.0]
        for i, bi in enumerate(tab.b):
            if bi != 0.0:
                self._add_scaled(y, E.get(1.0 - tab.c[i]), K[i], h * bi)
