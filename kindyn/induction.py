"""The induction equation split for integrating-factor time stepping.

    dB/dt = curl(u x B) + eta Lap B        <=>     d b_hat/dt = N(t, b_hat) - eta |k|^2 b_hat

:class:`InductionOperator` evaluates the non-diffusive part ``N(t, b_hat) = (curl(u x B))_hat``
pseudo-spectrally: ``B`` is brought to the grid, multiplied by ``u(t)`` on the grid, transformed
back, and the curl is taken spectrally. Both ``u`` and ``B`` are kept within the 2/3-rule band, so
the quadratic product is free of aliasing, and the result is masked to that band. The output is
exactly solenoidal (it is a curl), so ``div B`` stays at round-off. The diffusion ``eta |k|^2`` is
handed to the stepper as decay rates and integrated exactly.

The uniform (k = 0) component of ``B`` is left untouched by ``N`` (``k x ... = 0``) and does not
diffuse: it is the neutral mode of the periodic problem.
"""

from __future__ import annotations

import numpy as np

from kindyn.calculus import cross
from kindyn.flows.base import sample_velocity


class InductionOperator:
    """``N(t, b_hat) = (curl(u x B))_hat`` on the dealiased band; buffers allocated once.

    Parameters
    ----------
    box, flow, engine:
        The box, a flow (see :mod:`kindyn.flows.base`) and a transform engine with 3 components.
    eta:
        Magnetic diffusivity; :attr:`decay_rates` is ``eta |k|^2``.
    """

    def __init__(self, box, flow, engine, eta: float):
        self.box, self.flow, self.engine, self.eta = box, flow, engine, float(eta)
        real_dtype = engine.real.dtype
        self.decay_rates = (self.eta * box.k_squared).astype(real_dtype)
        self.mask = box.dealias_mask.astype(real_dtype)
        kx, ky, kz = box.wavenumbers
        complex_dtype = engine.spectral.dtype
        self._ik = tuple((1j * k).astype(complex_dtype) for k in (kx, ky, kz))
        self._velocity = np.empty(engine.real.shape, dtype=real_dtype)
        self._field = np.empty(engine.real.shape, dtype=real_dtype)
        self._scratch_real = np.empty(box.shape, dtype=real_dtype)
        self._scratch_hat = np.empty(box.spectral_shape, dtype=complex_dtype)
        self._velocity_time = None
        self.evaluations = 0

    def velocity(self, t: float) -> np.ndarray:
        """The flow on the grid at ``t`` (cached: a steady flow is sampled once)."""
        if self._velocity_time is None or (not self.flow.steady and t != self._velocity_time):
            sample_velocity(self.flow, self.box, t, out=self._velocity)
            self._velocity_time = t
        return self._velocity

    def __call__(self, t: float, b_hat: np.ndarray, out: np.ndarray) -> np.ndarray:
        """Write ``(curl(u(t) x B))_hat`` for the field ``b_hat`` into ``out``."""
        engine = self.engine
        engine.spectral[...] = b_hat
        engine.backward()
        np.copyto(self._field, engine.real)
        cross(self.velocity(t), self._field, out=engine.real, scratch=self._scratch_real)
        engine.forward()
        self.curl_masked(engine.spectral, out)
        self.evaluations += 1
        return out

    def curl_masked(self, e_hat: np.ndarray, out: np.ndarray) -> np.ndarray:
        """``out = mask * (i k x e_hat)`` without temporaries."""
        ikx, iky, ikz = self._ik
        tmp = self._scratch_hat
        for i, (ka, a, kb, b) in enumerate(((iky, 2, ikz, 1), (ikz, 0, ikx, 2), (ikx, 1, iky, 0))):
            np.multiply(ka, e_hat[a], out=out[i])
            np.multiply(kb, e_hat[b], out=tmp)
            out[i] -= tmp
            out[i] *= self.mask
        return out
