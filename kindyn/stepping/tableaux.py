"""Explicit Runge–Kutta tableaux as data: ``(a, b, c)`` with ``c_i = sum_j a_ij``, and their stability limits.

Used in integrating-factor (Lawson) form by :mod:`kindyn.stepping.integrating_factor`; the order of
the underlying explicit scheme carries over when the linear part is integrated exactly.

Stability of the integrating-factor scheme on advection (derivation)
--------------------------------------------------------------------
Take one mode of ``dy/dt = lambda y - r y``: ``lambda`` an eigenvalue of the advective operator
(imaginary for pure advection), ``r >= 0`` its exact decay rate (diffusion ``eta |k|^2``). With
``E(s) = exp(-r s)`` the Lawson stages are ``Y_i = E(c_i h) y_n + h sum_j a_ij E((c_i - c_j) h)
lambda Y_j``. By induction ``Y_i = E(c_i h) P_i(z) y_n`` with ``z = lambda h`` (every factor
``E((c_i - c_j) h) E(c_j h) = E(c_i h)``), and ``P_i`` are the stage polynomials of the explicit
scheme; the same for ``y_{n+1} = E(h) y_n + h sum_i b_i E((1 - c_i) h) lambda Y_i``. So one step
multiplies the mode by

    G = exp(-r h) R(z),      R(z) = 1 + z b^T (I - z A)^{-1} 1,

the stability function of the explicit tableau (:func:`stability_function`). The step is stable
when ``|G| <= 1``.

* **rk4, rk3**: ``|R(iy)| <= 1`` on a segment ``|y| <= Y_0`` of the imaginary axis (classical RK4:
  ``Y_0 = 2 sqrt 2``, ``|R(iy)|^2 = 1 - y^6/72 + y^8/576``; Kutta's RK3: ``Y_0 = sqrt 3``,
  ``|R(iy)|^2 = 1 - y^4/12 + y^6/36``). There ``|G| <= 1`` for every ``r >= 0``: the limit needs
  no diffusion, and it is the limit used (``imaginary_stability``).
* **rk2** (explicit midpoint): ``R(z) = 1 + z + z^2/2``, ``|R(iy)|^2 = 1 + y^4/4 > 1`` for every
  ``y != 0``: pure advection is amplified at any step. In integrating-factor form it is stable only
  where the exact decay outweighs that growth, ``(1 + y^4/4) exp(-2 r h) <= 1``. Which decay does a
  mode with ``|lambda h| = y`` have? An advective eigenvalue of a mode near wavenumber ``k`` is
  bounded by ``|u . k| <= U |k|`` (``U = max_x |u|``), so such a mode has ``|k| >= y/(h U)`` and
  ``r h = eta |k|^2 h >= delta y^2`` with the *step diffusion number* ``delta = eta/(h U^2)``.
  The scheme is therefore stable for every advective eigenvalue up to ``|lambda h| <= Y`` when

      ln(1 + y^4/4) <= 2 delta y^2      for all 0 < y <= Y,

  and the limit ``Y(delta)`` is the smallest positive root of ``ln(1 + Y^4/4) = 2 delta Y^2``
  (``Y ~ sqrt(8 delta)`` for small ``delta``; no root, i.e. no limit, once ``delta`` exceeds
  ``max_y ln(1 + y^4/4)/(2 y^2) = 0.2011..``, reached near ``y = 2``). :func:`advective_limit`
  computes it from ``R`` itself for any tableau without an imaginary-axis segment.

The bound ``|lambda| <= U |k|`` is the local (frozen-coefficient) estimate of the advective
spectrum, so the rk2 limit is a sufficient condition of the same kind as the rk3/rk4 ones with
the Courant number ``C = dt sum_i max|u_i| k_max,i`` as the bound on ``|lambda h|`` (common
practice for pseudo-spectral codes). It is conservative: in measurements on the 1:1:1 ABC flow it
refuses steps 2-3x below the largest step that still gave the right growth rate.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Tableau:
    name: str
    order: int
    a: tuple[tuple[float, ...], ...]
    b: tuple[float, ...]
    c: tuple[float, ...]
    imaginary_stability: float  # |lambda h| limit on the imaginary axis (advection) without diffusion; 0: none

    @property
    def stages(self) -> int:
        return len(self.b)

    @property
    def needs_diffusion(self) -> bool:
        """True when no segment of the imaginary axis is stable (rk2): the limit depends on diffusion."""
        return not self.imaginary_stability > 0

    def advective_limit(self, damping: float = 0.0) -> float:
        """The largest Courant number ``|lambda h|`` the step accepts (module docstring).

        ``damping`` is the step diffusion number ``delta = eta/(h U^2)``; it is used only by a tableau
        without an imaginary-axis segment (``imaginary_stability = 0``). ``inf``: no limit."""
        if not self.needs_diffusion:
            return self.imaginary_stability
        if not damping > 0:  # without diffusion no step is stable (|R(iy)| > 1 for every y != 0)
            return 0.0
        return advective_limit(self, damping)


def stability_function(tableau: Tableau, z: complex) -> complex:
    """``R(z) = 1 + z b^T (I - z A)^{-1} 1`` of the explicit tableau (one step of ``y' = lambda y``, ``z = lambda h``)."""
    s = tableau.stages
    A = np.zeros((s, s), dtype=complex)
    for i, row in enumerate(tableau.a):
        A[i, :len(row)] = row
    stage = np.linalg.solve(np.eye(s) - z * A, np.ones(s, dtype=complex))
    return complex(1.0 + z * np.dot(np.asarray(tableau.b, dtype=complex), stage))


_ROUND_OFF = 1e-15  # |R(iy)|^2 of a stable segment computed in double precision: within this of 1


def _excess(tableau: Tableau, y: float, damping: float) -> float:
    """``ln|R(iy)|^2 - 2 delta y^2``: positive where the damped step amplifies."""
    return 2.0 * math.log(abs(stability_function(tableau, 1j * y))) - 2.0 * damping * y * y


def advective_limit(tableau: Tableau, damping: float, y_max: float = 20.0, points: int = 2000) -> float:
    """Smallest ``Y > 0`` with ``|R(iY)|^2 = exp(2 delta Y^2)`` and amplification just beyond it
    (``inf`` if the damped step never amplifies on ``0 < y <= y_max``): a scan on ``points``
    logarithmically spaced values from 1e-4, then bisection to 1e-12 relative."""
    damping = max(0.0, float(damping))
    ys = np.geomspace(1e-4, y_max, points)
    for i, y in enumerate(ys):
        if _excess(tableau, y, damping) > _ROUND_OFF:
            if i == 0:
                return 0.0
            lo, hi = ys[i - 1], y
            for _ in range(200):
                mid = 0.5 * (lo + hi)
                if _excess(tableau, mid, damping) > _ROUND_OFF:
                    hi = mid
                else:
                    lo = mid
                if hi - lo < 1e-12 * hi:
                    break
            return lo
    return math.inf


TABLEAUX = {
    "rk4": Tableau("rk4", 4,  # classical fourth-order Runge–Kutta (Kutta 1901)
                   a=((), (0.5,), (0.0, 0.5), (0.0, 0.0, 1.0)),
                   b=(1 / 6, 1 / 3, 1 / 3, 1 / 6), c=(0.0, 0.5, 0.5, 1.0), imaginary_stability=2 * 2**0.5),
    "rk3": Tableau("rk3", 3,  # Kutta's third-order scheme
                   a=((), (0.5,), (-1.0, 2.0)),
                   b=(1 / 6, 2 / 3, 1 / 6), c=(0.0, 0.5, 1.0), imaginary_stability=3**0.5),
    "rk2": Tableau("rk2", 2,  # explicit midpoint rule: stable on advection only with diffusion (see above)
                   a=((), (0.5,)), b=(0.0, 1.0), c=(0.0, 0.5), imaginary_stability=0.0),
}
