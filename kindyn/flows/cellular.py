"""Cellular flows: Roberts, Galloway–Proctor (time-periodic) and Taylor–Green.

Roberts flow (Roberts 1972, Phil. Trans. R. Soc. Lond. A 271, 411), z-independent and helical,
``u = (d psi/dy, -d psi/dx, k_f psi)/k`` for a stream function ``psi``. Two published forms:

* ``form = "sum"`` (default; the form common in later work)::

      u = U ( cos ky, sin kx, cos kx + sin ky ),   psi = cos kx + sin ky,   curl u = k u,
      k_f = k,  <u^2> = 2 U^2,  <u_z^2> = U^2.

* ``form = "product"`` (the cell form ``psi = sin kx sin ky``)::

      u = U ( sin kx cos ky, -cos kx sin ky, sqrt(2) sin kx sin ky ),   curl u = sqrt(2) k u,
      k_f = sqrt(2) k,  <u^2> = U^2,  <u_z^2> = U^2/2.

Galloway–Proctor flow (Galloway & Proctor 1992, Nature 356, 691): the sum-form Roberts flow with
its cells moving on circles (``polarisation = "circular"``) or lines (``"linear"``)::

    u = sqrt(3/2) U ( cos(ky + eps sin wt), sin(kx + eps cos wt),
                      cos(kx + eps cos wt) + sin(ky + eps sin wt) )          (circular)

with ``sin wt`` replaced by ``cos wt`` for linear polarisation. Published case ``eps = w = 1``.
Declared scales ``U`` and ``k_f = k``, so ``Rm = U/(eta k)`` (Rm = 1/eta for the published flow,
which has <u^2> = 3 U^2; the sqrt(3/2) normalisation is quoted from memory).

Taylor–Green flow (Taylor & Green 1937, Proc. R. Soc. A 158, 499), non-helical::

    u = U ( sin kx cos ky cos kz, -cos kx sin ky cos kz, 0 ),   k_f = sqrt(3) k,  <u^2> = U^2/4.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kindyn.errors import ParameterError
from kindyn.flows.base import finite, positive, require_kept, whole_mode_number

ROBERTS_FORMS = ("sum", "product")
POLARISATIONS = ("circular", "linear")


def _xy_modes(k, box, name):
    mx = whole_mode_number(k, box.lengths[0], "k", "x")
    my = whole_mode_number(k, box.lengths[1], "k", "y")
    require_kept(box, (mx, my, 0), name)


@dataclass(frozen=True)
class RobertsFlow:
    """Steady z-independent helical cellular flow (see module docstring for the forms)."""

    U: float = 1.0
    k: float = 1.0
    form: str = "sum"

    def __post_init__(self):
        finite("U", self.U)
        positive("k", self.k)
        if self.form not in ROBERTS_FORMS:
            raise ParameterError("form", self.form, f"one of {', '.join(map(repr, ROBERTS_FORMS))}")

    @property
    def speed(self) -> float:
        return abs(self.U)

    @property
    def wavenumber(self) -> float:
        return self.k if self.form == "sum" else math.sqrt(2) * self.k

    period = None
    steady = True
    z_independent = True
    scale_rule = "declared by the roberts flow type: U = U, k_f = k (sum form) or sqrt(2) k (product form)"

    def velocity(self, x, y, z, t):
        U, k = self.U, self.k
        if self.form == "sum":
            return (U * np.cos(k * y), U * np.sin(k * x), U * (np.cos(k * x) + np.sin(k * y)))
        sx, cx, sy, cy = np.sin(k * x), np.cos(k * x), np.sin(k * y), np.cos(k * y)
        return (U * sx * cy, -U * cx * sy, math.sqrt(2) * U * sx * sy)

    def check_box(self, box) -> None:
        _xy_modes(self.k, box, "roberts")


@dataclass(frozen=True)
class GallowayProctorFlow:
    """Time-periodic Roberts-type flow with cells moving on circles or lines."""

    U: float = 1.0
    k: float = 1.0
    epsilon: float = 1.0
    omega: float = 1.0
    polarisation: str = "circular"

    def __post_init__(self):
        finite("U", self.U)
        positive("k", self.k)
        finite("epsilon", self.epsilon)
        positive("omega", self.omega)
        if self.polarisation not in POLARISATIONS:
            raise ParameterError("polarisation", self.polarisation,
                                 f"one of {', '.join(map(repr, POLARISATIONS))}")

    @property
    def speed(self) -> float:
        return abs(self.U)

    @property
    def wavenumber(self) -> float:
        return self.k

    @property
    def period(self) -> float:
        return 2 * math.pi / self.omega

    steady = False
    z_independent = True
    scale_rule = "declared by the galloway-proctor flow type: U = U (<|u|^2> = 3 U^2), k_f = k"

    def phases(self, t: float) -> tuple[float, float]:
        """Phase shifts ``(a, b)`` of the x and y cells: ``cos(kx + a)``, ``sin(ky + b)``."""
        a = self.epsilon * math.cos(self.omega * t)
        b = self.epsilon * (math.sin(self.omega * t) if self.polarisation == "circular"
                            else math.cos(self.omega * t))
        return a, b

    def velocity(self, x, y, z, t):
        a, b = self.phases(t)
        amp = math.sqrt(1.5) * self.U
        k = self.k
        cx = np.cos(k * x + a)
        sy = np.sin(k * y + b)
        return (amp * np.cos(k * y + b), amp * np.sin(k * x + a), amp * (cx + sy))

    def check_box(self, box) -> None:
        _xy_modes(self.k, box, "galloway-proctor")


@dataclass(frozen=True)
class TaylorGreenFlow:
    """Steady non-helical Taylor–Green vortex flow."""

    U: float = 1.0
    k: float = 1.0

    def __post_init__(self):
        finite("U", self.U)
        positive("k", self.k)

    @property
    def speed(self) -> float:
        return abs(self.U)

    @property
    def wavenumber(self) -> float:
        return math.sqrt(3) * self.k

    period = None
    steady = True
    z_independent = False
    scale_rule = "declared by the taylor-green flow type: U = U (<|u|^2> = U^2/4), k_f = sqrt(3) k"

    def velocity(self, x, y, z, t):
        U, k = self.U, self.k
        cz = np.cos(k * z)
        return (U * np.sin(k * x) * np.cos(k * y) * cz, -U * np.cos(k * x) * np.sin(k * y) * cz,
                np.zeros((1, 1, 1)))

    def check_box(self, box) -> None:
        modes = [whole_mode_number(self.k, L, "k", axis) for L, axis in zip(box.lengths, "xyz")]
        require_kept(box, tuple(modes), "taylor-green")
