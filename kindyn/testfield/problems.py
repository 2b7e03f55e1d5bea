"""The test problems of one average, on the one induction operator.

For ``n`` test fields ``B_T`` stacked in one solver (``3 n`` components, test ``t`` in components
``3t .. 3t+2``) and one average ``<.>`` (box or planes, see :mod:`kindyn.testfield.fields`)::

    full:   d b/dt = P curl( u x (B_T + b) ) - eta |k|^2 b
    SOCA:   d b/dt = P curl( u x B_T )       - eta |k|^2 b

with ``P`` the removal of the average's modes: this is
:class:`~kindyn.induction.InductionOperator` with ``mean_field = B_T`` and ``fluctuation_of`` the
average (built by :func:`kindyn.assemble.build_test_solver`), so the test problems share the band,
the compiled array kernels and one batched transform over all ``3 n`` components with the 3-D run.
``u``, ``B_T`` and ``b`` lie in the 2/3-rule band, so the products are free of aliasing on the kept
modes.

What is measured is the mean EMF ``Ebar = <u x b>`` of every test problem
(:meth:`TestProblems.emf`), as profiles along the averaging axis.
"""

from __future__ import annotations

import numpy as np

from kindyn.assemble import build_test_solver
from kindyn.testfield.fields import mean_profile


class TestProblems:
    """Stacked test problems for one average (``axis=None``: box; else planes normal to ``axis``).

    Parameters
    ----------
    layout:
        The box layout (double precision) that holds the problems.
    flow, eta:
        The flow and the magnetic diffusivity.
    fields:
        The :class:`~kindyn.testfield.fields.TestField` objects (all for the same average).
    axis:
        ``None`` for the box average, else the averaging axis 0, 1 or 2.
    soca:
        Drop ``P curl(u x b)`` (second-order correlation approximation).
    scheme, kernels:
        Runge–Kutta scheme of the stepper and the array-kernel set (made from the layout's settings when None).
    """

    __test__ = False  # not a pytest class

    def __init__(self, layout, flow, eta: float, fields, axis: int | None, soca: bool = False,
                 scheme: str = "rk4", kernels=None):
        self.layout, self.flow, self.eta = layout, flow, float(eta)
        self.fields, self.axis, self.soca, self.count = tuple(fields), axis, bool(soca), len(fields)
        mean_field = np.stack([f.physical(layout) for f in self.fields])
        self.solver = build_test_solver(layout, flow, eta, mean_field, "box" if axis is None else axis, soca,
                                        scheme, kernels)
        self.operator = self.solver.operator
        self.stepper = self.solver.stepper

    @property
    def shape(self) -> tuple:
        return self.operator.shape

    @property
    def decay_rates(self) -> np.ndarray:
        return self.operator.decay_rates

    def source(self, t: float, out: np.ndarray) -> np.ndarray:
        """``P curl(u(t) x B_T)`` for every test field (cached for a steady flow)."""
        return self.operator.source(t, out)

    def homogeneous(self, t: float, b_hat: np.ndarray, out: np.ndarray) -> np.ndarray:
        """``P curl(u(t) x b)``: the term SOCA drops (also the operator of the steady solve)."""
        return self.operator.homogeneous(t, b_hat, out)

    def __call__(self, t: float, b_hat: np.ndarray, out: np.ndarray) -> np.ndarray:
        """The right-hand side without diffusion."""
        return self.operator(t, b_hat, out)

    def emf(self, t: float, b_hat: np.ndarray) -> np.ndarray:
        """Mean EMF ``<u(t) x b>`` of every test problem.

        Shape ``(n, 3)`` for the box average, ``(n, 3, n_axis)`` (profiles on the grid points of the
        averaging axis) for planar averages.
        """
        spectral = self.operator.cross_hat(t, b_hat)
        return mean_profile(spectral.reshape(self.count, 3, *self.layout.spectral_shape), self.layout, self.axis)
