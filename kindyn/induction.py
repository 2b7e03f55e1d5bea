"""The induction equation split for integrating-factor time stepping.

    dB/dt = curl(u x B) + eta Lap B        <=>     d b_hat/dt = N(t, b_hat) - eta |k|^2 b_hat

:class:`InductionOperator` evaluates the non-diffusive part ``N(t, b_hat) = (curl(u x B))_hat``
pseudo-spectrally: ``B`` is brought to the grid, multiplied by ``u(t)`` on the grid, transformed
back, and the curl is taken spectrally. Both ``u`` and ``B`` are kept within the 2/3-rule band, so
the quadratic product is free of aliasing, and the result is masked to that band. The output is
exactly solenoidal (it is a curl), so ``div B`` stays at round-off. The diffusion ``eta |k|^2`` is
handed to the stepper as decay rates and integrated exactly.

The 2/3-rule band is a product of kept mode numbers along each axis (``|m_x| < nx/3`` is two index
ranges of the FFT order, and so on), so it is the union of at most four rectangular blocks of the
half grid: :attr:`InductionOperator.support`. The stepper advances only the values in these blocks
(:meth:`InductionOperator.packed`; see :mod:`kindyn.stepping.integrating_factor`), which keeps ``B``
inside the band; modes outside it only decay. The curl is evaluated on the blocks alone, with the
``1/N`` of the forward transform folded into its coefficients ``i k / N``.

Hot path (beside the FFTs, memory traffic is what costs): the velocity components are kept at the
shapes the flow returns (broadcastable, often two-dimensional); ``u x B`` is formed in place in the
engine's physical buffer; the band values are scattered into the transform buffer and the curl
gathered from it. These passes are the array kernels of :mod:`kindyn.array_kernels` (one fused,
possibly multi-threaded pass each with numba; blocked numpy otherwise). Unavoidable temporaries: a
time-dependent flow's velocity, made at each stage time.

The uniform (k = 0) component of ``B`` is left untouched by ``N`` (``k x ... = 0``) and does not
diffuse: it is the neutral mode of the periodic problem.
"""

from __future__ import annotations

import numpy as np

from kindyn.box import kept_index_ranges
from kindyn.errors import FlowError
from kindyn.array_kernels.numpy_kernels import NumpyKernels
from kindyn.stepping.integrating_factor import BlockSupport


def band_blocks(box) -> list[tuple[slice, ...]]:
    """The 2/3-rule band of the half grid as disjoint rectangular blocks of whole z lines.

    Returns index tuples over ``(x, y, z)`` of the half grid whose union is ``box.dealias_mask``:
    kept x ranges times kept y ranges (:func:`kindyn.box.kept_index_ranges`), with ``m_z = 0..max``
    along z.
    """
    nx, ny, _ = box.grid
    z_kept = slice(0, box.max_kept_modes[2] + 1)
    return [(x, y, z_kept) for x in kept_index_ranges(nx) for y in kept_index_ranges(ny)]


class InductionOperator:
    """``N(t, b_hat) = (curl(u x B))_hat`` on the dealiased band; buffers allocated once.

    Parameters
    ----------
    box, flow, engine:
        The box, a flow (see :mod:`kindyn.flows.base`) and a transform engine with 3 components.
    eta:
        Magnetic diffusivity; :attr:`decay_rates` is ``eta |k|^2``.
    kernels:
        The array-kernel set (:func:`kindyn.array_kernels.make_kernels`); numpy by default.

    Two entry points: :meth:`packed` on the band values packed as :attr:`support` describes (used by
    the stepper), and ``operator(t, b_hat, out)`` on full half-grid arrays (values of ``b_hat``
    outside the band are ignored; ``out`` is zero there).
    """

    def __init__(self, box, flow, engine, eta: float, kernels=None):
        self.box, self.flow, self.engine, self.eta = box, flow, engine, float(eta)
        self.kernels = kernels if kernels is not None else NumpyKernels()
        real_dtype = engine.real.dtype
        self.decay_rates = (self.eta * box.k_squared).astype(real_dtype)
        self.support = BlockSupport(band_blocks(box), box.spectral_shape)
        # the pyfftw engine can skip the 1/N pass of its forward transform; other engines normalise
        self._unnormalised = getattr(engine, "unnormalised_forward", False)
        scale = 1.0 / box.points if self._unnormalised else 1.0
        self._curl_wavenumbers = tuple((k * scale).astype(real_dtype) for k in box.wavenumbers)
        self._components, self._components_time = None, None  # u_x, u_y, u_z as the flow returns them
        self._last_stage_time = None  # for renovating flows, see _evaluation_time
        self._band_in = self._band_out = None  # for __call__ only
        self.evaluations = 0

    def _evaluation_time(self, t: float) -> float:
        """Time at which to sample the flow for a stage at ``t``.

        A renovating flow (attribute ``renewal_time`` tau) is redrawn at multiples of tau and is
        constant in between; its velocity is right-continuous. Steps are aligned with tau
        (:mod:`kindyn.timestep`), so a renewal falls on a step boundary ``t_n + h``. The last stage of
        the step that ends there (``c = 1``) must still see that step's realisation, while the first
        stage of the next step, called at the same time, must see the new one. A call at a renewal
        time that comes from an earlier stage is therefore sampled inside the step (half-way back to
        the previous stage); a repeated call at the same time is sampled at the time itself.
        """
        tau = getattr(self.flow, "renewal_time", None)
        previous, self._last_stage_time = self._last_stage_time, t
        if not tau or previous is None or previous >= t:
            return t
        n = round(t / tau)
        if n >= 1 and abs(t - n * tau) <= 1e-9 * tau:
            return t - 0.5 * min(t - previous, tau)
        return t

    def timing_probe(self):
        """A callable evaluating ``N`` once on a zero field at ``t = 0`` that leaves the operator's
        counters and renewal bookkeeping as they were (for :func:`kindyn.array_kernels.choose_threads`)."""
        dtype = self.engine.spectral.dtype
        zero, out = np.zeros((3, self.support.size), dtype), np.empty((3, self.support.size), dtype)

        def evaluate():
            evaluations, last = self.evaluations, self._last_stage_time
            self.packed(0.0, zero, out)
            self.evaluations, self._last_stage_time = evaluations, last
        return evaluate

    def velocity_components(self, t: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``u_x, u_y, u_z`` at ``t`` as 3-D arrays of the shapes the flow returns (each broadcasts to
        the grid: the ABC flow's components depend on two coordinates each, so they are ``n`` times
        smaller than the grid and the cross product reads far less memory). Cached when steady."""
        if self._components_time is None or (not self.flow.steady and t != self._components_time):
            x, y, z = self.box.coordinates
            dtype = self.engine.real.dtype
            components = []
            for c in self.flow.velocity(x, y, z, t):
                c = np.asarray(c, dtype=dtype)
                c = c.reshape((1,) * (3 - c.ndim) + c.shape)
                if c.ndim != 3 or any(m not in (1, n) for m, n in zip(c.shape, self.box.shape)):
                    raise FlowError(f"velocity component of shape {c.shape} does not broadcast to the grid "
                                    f"{self.box.shape} (flow {type(self.flow).__name__})")
                components.append(c)
            self._components, self._components_time = tuple(components), t
        return self._components

    def __call__(self, t: float, b_hat: np.ndarray, out: np.ndarray) -> np.ndarray:
        """Write ``(curl(u(t) x B))_hat`` for the band part of ``b_hat`` (full half grid) into ``out``."""
        if self._band_in is None:
            self._band_in, self._band_out = (np.empty((3, self.support.size), self.engine.spectral.dtype)
                                             for _ in range(2))
        self.packed(t, self.support.gather(b_hat, self._band_in), self._band_out)
        out.fill(0)
        return self.support.add_to(self._band_out, out)

    def packed(self, t: float, b_band: np.ndarray, out: np.ndarray) -> np.ndarray:
        """As ``__call__`` for a field given by its band values ``b_band`` (``(3, support.size)``,
        packed; zero outside the band); writes the band values of the result into ``out``."""
        self.kernels.spectral_from_band(self.support, b_band, self.engine.spectral)
        self._emf_hat(t)
        self.kernels.curl_to_band(self.support, self.engine.spectral, self._curl_wavenumbers, out)
        self.evaluations += 1
        return out

    def _emf_hat(self, t: float) -> None:
        """``engine.spectral <- (u(t) x B)_hat`` for ``B_hat`` in ``engine.spectral`` (``N`` times
        that on the unnormalised path)."""
        engine, u = self.engine, self.velocity_components(self._evaluation_time(t))
        engine.backward()
        self.kernels.cross_in_place(u, engine.real)
        if self._unnormalised:
            engine.forward(normalise=False)
        else:
            engine.forward()
