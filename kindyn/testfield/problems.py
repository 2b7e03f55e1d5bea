"""Right-hand sides of the test problems, pseudo-spectral like :class:`kindyn.induction.InductionOperator`.

For ``n`` test fields ``B_T`` stacked in one engine (``3 n`` components, test ``t`` in components
``3t .. 3t+2``) and one average ``<.>`` (box or planes, see :mod:`kindyn.testfield.fields`)::

    full:   d b/dt = P curl( u x (B_T + b) ) - eta |k|^2 b
    SOCA:   d b/dt = P curl( u x B_T )       - eta |k|^2 b

``P`` keeps the dealiased fluctuation modes (2/3 rule, planar- or box-mean modes removed), so
``curl(f')`` is written ``P curl f`` and ``b`` never acquires a mean. Removing the mean of
``u x B_T`` too (``Ubar x B_T`` belongs to the mean-field equation) is the usual test-field
formulation with a mean flow ``Ubar`` kept in the fluctuation equation (Schrinner et al. 2007);
for horizontal test fields and ``<u_z> = 0`` that mean has zero curl anyway. ``u``, ``B_T`` and
``b`` lie in the 2/3-rule band, so the products are free of aliasing on the kept modes.

The mean EMF ``Ebar = <u x b>`` is returned as profiles along the averaging axis
(:meth:`TestProblemOperator.emf`). Buffers are allocated once; a steady flow is sampled once and
its SOCA source is computed once.
"""

from __future__ import annotations

import numpy as np

from kindyn.calculus import cross
from kindyn.flows.base import sample_velocity
from kindyn.testfield.fields import mean_mode_mask, mean_profile


class TestProblemOperator:
    """Stacked test problems for one average (``axis=None``: box; else planes normal to ``axis``).

    Parameters
    ----------
    box, flow, engine:
        The box, a flow and a transform engine with ``3 * len(fields)`` components (double precision).
    eta:
        Magnetic diffusivity; :attr:`decay_rates` is ``eta |k|^2`` (half grid).
    fields:
        The :class:`~kindyn.testfield.fields.TestField` objects (all for the same average).
    axis:
        ``None`` for the box average, else the averaging axis 0, 1 or 2.
    soca:
        Drop ``P curl(u x b)`` (second-order correlation approximation).
    """

    __test__ = False  # not a pytest class

    def __init__(self, box, flow, engine, eta: float, fields, axis: int | None, soca: bool = False):
        n = len(fields)
        if engine.ncomp != 3 * n:
            raise ValueError(f"engine has {engine.ncomp} components; {3 * n} needed for {n} test fields")
        self.box, self.flow, self.engine, self.eta = box, flow, engine, float(eta)
        self.fields, self.axis, self.soca, self.count = tuple(fields), axis, bool(soca), n
        self.decay_rates = self.eta * box.k_squared
        keep = box.dealias_mask & ~mean_mode_mask(box, axis)
        self.projection = keep.astype(float)
        kx, ky, kz = box.wavenumbers
        self._ik = tuple(np.broadcast_to(1j * k, box.spectral_shape).astype(complex) for k in (kx, ky, kz))
        self.test_physical = np.stack([f.physical(box) for f in fields]) if n else np.zeros((0, 3, *box.shape))
        self._velocity = np.empty((3, *box.shape))
        self._velocity_time = None
        self._field = np.empty((3 * n, *box.shape))
        self._scratch_real = np.empty(box.shape)
        self._scratch_hat = np.empty(box.spectral_shape, dtype=complex)
        self._steady_source = None
        self.evaluations = 0

    @property
    def shape(self) -> tuple:
        return self.engine.spectral.shape

    def velocity(self, t: float) -> np.ndarray:
        """``u(t)`` on the grid (a steady flow is sampled once)."""
        if self._velocity_time is None or (not self.flow.steady and t != self._velocity_time):
            sample_velocity(self.flow, self.box, t, out=self._velocity)
            self._velocity_time = t
        return self._velocity

    def _cross_into_engine(self, u: np.ndarray, fields: np.ndarray) -> None:
        """``engine.real[3t:3t+3] = u x fields[3t:3t+3]`` for every test ``t``."""
        real = self.engine.real
        for t in range(self.count):
            cross(u, fields[3 * t:3 * t + 3], out=real[3 * t:3 * t + 3], scratch=self._scratch_real)

    def _curl_projected(self, e_hat: np.ndarray, out: np.ndarray) -> np.ndarray:
        """``out = P (i k x e_hat)`` for every test (no temporaries)."""
        ikx, iky, ikz = self._ik
        tmp = self._scratch_hat
        for t in range(self.count):
            e, o = e_hat[3 * t:3 * t + 3], out[3 * t:3 * t + 3]
            for i, (ka, a, kb, b) in enumerate(((iky, 2, ikz, 1), (ikz, 0, ikx, 2), (ikx, 1, iky, 0))):
                np.multiply(ka, e[a], out=o[i])
                np.multiply(kb, e[b], out=tmp)
                o[i] -= tmp
                o[i] *= self.projection
        return out

    def source(self, t: float, out: np.ndarray) -> np.ndarray:
        """``P curl(u(t) x B_T)`` for every test field (cached for a steady flow)."""
        if self.flow.steady and self._steady_source is not None:
            np.copyto(out, self._steady_source)
            return out
        self._cross_into_engine(self.velocity(t), self.test_physical.reshape(3 * self.count, *self.box.shape))
        self.engine.forward()
        self._curl_projected(self.engine.spectral, out)
        if self.flow.steady:
            self._steady_source = out.copy()
        return out

    def _backward(self, b_hat: np.ndarray) -> np.ndarray:
        self.engine.spectral[...] = b_hat
        self.engine.backward()
        np.copyto(self._field, self.engine.real)
        return self._field

    def homogeneous(self, t: float, b_hat: np.ndarray, out: np.ndarray) -> np.ndarray:
        """``P curl(u(t) x b)``: the term SOCA drops (also the operator of the steady solve)."""
        field = self._backward(b_hat)
        self._cross_into_engine(self.velocity(t), field)
        self.engine.forward()
        self.evaluations += 1
        return self._curl_projected(self.engine.spectral, out)

    def __call__(self, t: float, b_hat: np.ndarray, out: np.ndarray) -> np.ndarray:
        """The right-hand side without diffusion (for the integrating-factor stepper)."""
        if self.soca:
            self.evaluations += 1
            return self.source(t, out)
        field = self._backward(b_hat)
        field += self.test_physical.reshape(field.shape)
        self._cross_into_engine(self.velocity(t), field)
        self.engine.forward()
        self.evaluations += 1
        return self._curl_projected(self.engine.spectral, out)

    def emf(self, t: float, b_hat: np.ndarray) -> np.ndarray:
        """Mean EMF ``<u(t) x b>`` of every test problem.

        Shape ``(n, 3)`` for the box average, ``(n, 3, n_axis)`` (profiles on the grid points of the
        averaging axis) for planar averages.
        """
        field = self._backward(b_hat)
        self._cross_into_engine(self.velocity(t), field)
        self.engine.forward()
        spectral = self.engine.spectral.reshape(self.count, 3, *self.box.spectral_shape)
        return mean_profile(spectral, self.box, self.axis)
