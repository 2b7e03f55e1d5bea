"""Matrix-free propagators ``A = exp(L T)`` built from the time-stepper.

``L b = curl(u x b) + eta Lap b`` on dealiased, solenoidal, zero-mean fields. The propagator over a
time ``T = steps * dt`` is ``steps`` integrating-factor Runge–Kutta steps
(:class:`~kindyn.stepping.IntegratingFactorStepper`, exact diffusion) starting at ``start_time``:

* steady flow: ``A = S^steps`` with ``S`` the one-step map, so an eigenvalue ``mu`` of ``A`` is
  ``sigma^steps`` for an eigenvalue ``sigma`` of ``S`` and ``p = ln(mu)/T = ln(sigma)/dt`` does not
  depend on ``T`` (only the Krylov convergence and the branch of the angle do). ``sigma`` differs
  from ``exp(p dt)`` by the scheme's local error, so ``p`` carries an ``O(dt^4)`` error (RK4) that is
  controlled by ``dt`` alone;
* time-periodic flow with ``T`` its period: ``A`` is the period map (monodromy), whose eigenvalues
  are the Floquet multipliers (:mod:`kindyn.eigen.floquet`).

The vectors are those of a basis from :mod:`kindyn.eigen.basis` (real for the 3-D half grid, complex
for the single-k_z reduction); Euclidean norms of these vectors are energy norms.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import scipy.sparse.linalg

from kindyn.assemble import build_kz_plane_solver, build_solver
from kindyn.eigen.basis import KzPlaneBasis, SolenoidalBasis
from kindyn.layout import BoxLayout, KzPlane
from kindyn.transforms import TransformSettings


class Propagator:
    """``v -> A v``: field from vector, ``steps`` steps of size ``dt`` from ``start_time``, vector back.

    ``stepper`` advances a spectral array in place (``stepper.step(t, y, dt)``), ``basis`` maps
    vectors to spectral arrays of shape ``shape`` and back. :attr:`applications` counts uses of ``A``.
    """

    def __init__(self, stepper, basis, shape, dt: float, steps: int, start_time: float = 0.0, solver=None):
        if steps < 1 or not dt > 0:
            raise ValueError(f"a propagator needs steps >= 1 and dt > 0, got steps={steps}, dt={dt}")
        self.stepper, self.basis, self.dt, self.steps = stepper, basis, float(dt), int(steps)
        self.start_time = float(start_time)
        self.solver = solver  # the engine/operator/stepper bundle, for callers that need the grid
        self._field = np.zeros(shape, complex)
        self.applications = 0

    @property
    def time(self) -> float:
        """The propagation time ``T = steps * dt``."""
        return self.steps * self.dt

    @property
    def size(self) -> int:
        return self.basis.size

    @property
    def dtype(self):
        return self.basis.dtype

    def apply(self, v: np.ndarray, steps: int | None = None) -> np.ndarray:
        """``A v`` (or the map over ``steps`` steps instead of :attr:`steps`); returns a new vector."""
        b = self.basis.field_hat_from_vector(np.asarray(v, dtype=self.dtype).ravel(), self._field)
        for n in range(self.steps if steps is None else steps):
            self.stepper.step(self.start_time + n * self.dt, b, self.dt)
        self.applications += 1
        return self.basis.vector_from_field_hat(b)

    def linear_operator(self) -> scipy.sparse.linalg.LinearOperator:
        return scipy.sparse.linalg.LinearOperator((self.size, self.size), matvec=self.apply, dtype=self.dtype)

    def field_hat(self, v: np.ndarray) -> np.ndarray:
        """The spectral field of vector ``v`` (a new array)."""
        return self.basis.field_hat_from_vector(np.asarray(v, dtype=self.dtype).ravel(),
                                                np.empty_like(self._field))


def box_propagator(box, flow, eta: float, dt: float, steps: int, transforms=None, scheme: str = "rk4",
                   start_time: float = 0.0) -> Propagator:
    """The 3-D propagator on ``box`` (real vectors, :class:`~kindyn.eigen.basis.SolenoidalBasis`).

    Built with :func:`kindyn.assemble.build_solver`; eigen-solves always run in double precision.
    """
    settings = replace(transforms or TransformSettings(), precision="double")
    layout = BoxLayout(box, settings)
    solver = build_solver(layout, flow, eta, settings, scheme)
    return Propagator(solver.stepper, SolenoidalBasis(layout), solver.operator.shape, dt, steps, start_time,
                      solver)


def kz_plane_propagator(grid: KzPlane, flow, eta: float, dt: float, steps: int, scheme: str = "rk4",
                      start_time: float = 0.0, transforms=None) -> Propagator:
    """The planar propagator at ``grid.kz`` (complex vectors, :class:`~kindyn.eigen.basis.KzPlaneBasis`).

    ``transforms`` (a :class:`~kindyn.transforms.TransformSettings`) picks the plane engine, its
    threads and planning; the precision is always double.
    """
    settings = replace(transforms or TransformSettings(), precision="double")
    solver = build_kz_plane_solver(grid, flow, eta, scheme, settings)
    return Propagator(solver.stepper, KzPlaneBasis(solver.layout), solver.operator.shape, dt, steps, start_time,
                      solver)
