"""Explicit Runge–Kutta tableaux as data: ``(a, b, c)`` with ``c_i = sum_j a_ij``.

Used in integrating-factor (Lawson) form by :mod:`kindyn.stepping.integrating_factor`; the order of
the underlying explicit scheme carries over when the linear part is integrated exactly.
``imaginary_stability`` is the scheme's stability limit on the imaginary axis (classical RK4:
2 sqrt 2; Kutta's RK3: sqrt 3; the midpoint rule has none: it amplifies pure advection at any step,
slowly, so it needs diffusion to damp it).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Tableau:
    name: str
    order: int
    a: tuple[tuple[float, ...], ...]
    b: tuple[float, ...]
    c: tuple[float, ...]
    imaginary_stability: float  # |lambda h| limit on the imaginary axis (advection); 0: none

    @property
    def stages(self) -> int:
        return len(self.b)


TABLEAUX = {
    "rk4": Tableau("rk4", 4,  # classical fourth-order Runge–Kutta (Kutta 1901)
                   a=((), (0.5,), (0.0, 0.5), (0.0, 0.0, 1.0)),
                   b=(1 / 6, 1 / 3, 1 / 3, 1 / 6), c=(0.0, 0.5, 0.5, 1.0), imaginary_stability=2 * 2**0.5),
    "rk3": Tableau("rk3", 3,  # Kutta's third-order scheme
                   a=((), (0.5,), (-1.0, 2.0)),
                   b=(1 / 6, 2 / 3, 1 / 6), c=(0.0, 0.5, 1.0), imaginary_stability=3**0.5),
    "rk2": Tableau("rk2", 2,  # explicit midpoint rule
                   a=((), (0.5,)), b=(0.0, 1.0), c=(0.0, 0.5), imaginary_stability=0.0),
}
