"""Beltrami flows (``curl u = k u``): the ABC family and sums of ABC flows at several wavenumbers.

ABC flow (Arnold 1965; Dombre et al. 1986, J. Fluid Mech. 167, 353), in the convention used
throughout kindyn::

    u = ( A sin kz + C cos ky,
          B sin kx + A cos kz,
          C sin ky + B cos kx )

It satisfies ``curl u = k u`` (positive helicity ``<u . omega> = k <u^2>``), ``<u^2> = A^2+B^2+C^2``.
Declared scales: ``U = sqrt((A^2+B^2+C^2)/3)`` (so ``U = A`` when ``A = B = C``) and ``k_f = k``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kindyn.errors import ParameterError
from kindyn.flows.base import finite, positive, require_kept, whole_mode_number


def abc_velocity(A, B, C, k, x, y, z):
    """The ABC velocity components (broadcasting over the coordinate arrays)."""
    return (A * np.sin(k * z) + C * np.cos(k * y),
            B * np.sin(k * x) + A * np.cos(k * z),
            C * np.sin(k * y) + B * np.cos(k * x))


@dataclass(frozen=True)
class ABCFlow:
    """Arnold–Beltrami–Childress flow with amplitudes ``A, B, C`` and wavenumber ``k``."""

    A: float = 1.0
    B: float = 1.0
    C: float = 1.0
    k: float = 1.0

    def __post_init__(self):
        for key in "ABC":
            finite(key, getattr(self, key))
        positive("k", self.k)
        if self.A == self.B == self.C == 0:
            raise ParameterError("A", self.A, "at least one of A, B, C non-zero")

    @property
    def speed(self) -> float:
        return math.sqrt((self.A**2 + self.B**2 + self.C**2) / 3.0)

    @property
    def wavenumber(self) -> float:
        return self.k

    period = None
    steady = True
    scale_rule = "declared by the abc flow type: U = sqrt((A^2+B^2+C^2)/3), k_f = k"

    @property
    def z_independent(self) -> bool:
        return self.A == 0

    def velocity(self, x, y, z, t):
        return abc_velocity(self.A, self.B, self.C, self.k, x, y, z)

    def check_box(self, box) -> None:
        modes = [whole_mode_number(self.k, L, "k", axis) for L, axis in zip(box.lengths, "xyz")]
        require_kept(box, tuple(modes), "abc")


@dataclass(frozen=True)
class BeltramiSumFlow:
    """A sum of ABC flows: ``u = sum_n ABC(A_n, B_n, C_n, k_n)``.

    Each term is Beltrami with its own ``k_n``; the sum is Beltrami only when all ``k_n`` agree.
    Declared scales: ``U = sqrt(<u^2>/3)`` and ``k_f`` the energy-weighted mean wavenumber
    ``sum(E_n k_n)/sum(E_n)`` with ``E_n = A_n^2 + B_n^2 + C_n^2``.
    """

    A: tuple[float, ...] = (1.0,)
    B: tuple[float, ...] = (1.0,)
    C: tuple[float, ...] = (1.0,)
    k: tuple[float, ...] = (1.0,)

    def __post_init__(self):
        n = len(self.k)
        for key in ("A", "B", "C", "k"):
            values = getattr(self, key)
            if not isinstance(values, (list, tuple)) or len(values) != n or n == 0:
                raise ParameterError(key, values, f"a list of {max(n, 1)} numbers (one per term; A, B, C, k of equal length)")
            object.__setattr__(self, key, tuple(float(v) for v in values))
        for kn in self.k:
            positive("k", kn)

    @property
    def _energies(self):
        return [a * a + b * b + c * c for a, b, c in zip(self.A, self.B, self.C)]

    @property
    def speed(self) -> float:
        return math.sqrt(sum(self._energies) / 3.0)

    @property
    def wavenumber(self) -> float:
        e = self._energies
        return sum(en * kn for en, kn in zip(e, self.k)) / sum(e)

    period = None
    steady = True
    scale_rule = ("declared by the beltrami-sum flow type: U = sqrt(<|u|^2>/3), k_f = energy-weighted mean "
                  "of its wavenumbers")

    @property
    def z_independent(self) -> bool:
        return all(a == 0 for a in self.A)

    def velocity(self, x, y, z, t):
        total = [0.0, 0.0, 0.0]
        for a, b, c, kn in zip(self.A, self.B, self.C, self.k):
            for i, comp in enumerate(abc_velocity(a, b, c, kn, x, y, z)):
                total[i] = total[i] + comp
        return tuple(total)

    def check_box(self, box) -> None:
        modes = [max(whole_mode_number(kn, L, "k", axis) for kn in self.k)
                 for L, axis in zip(box.lengths, "xyz")]
        require_kept(box, tuple(modes), "beltrami-sum")
