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
engine's physical buffer, slab by slab so that the operands stay in cache; the stage values are
copied into the transform buffer and the curl read from it block by block. The array arithmetic
runs on one thread: it is bound by memory bandwidth, and on the two-core development machine a
two-thread split of the cross product ran at 0.9-1.1 times the one-thread speed (FFTW's own
threads do pay). Unavoidable temporaries: a time-dependent flow's velocity, made at each stage time.

The uniform (k = 0) component of ``B`` is left untouched by ``N`` (``k x ... = 0``) and does not
diffuse: it is the neutral mode of the periodic problem.
"""

from __future__ import annotations

import numpy as np

from kindyn.errors import FlowError
from kindyn.stepping.integrating_factor import BlockSupport

SLAB_BYTES = 1 << 17  # one component of a cross-product slab (128 KiB): the slab's operands stay in cache


def band_blocks(box) -> tuple[list[tuple[slice, ...]], list[tuple[slice, ...]]]:
    """The 2/3-rule band of the half grid as rectangular blocks, and its complement.

    Returns ``(kept, dropped)``: lists of index tuples over ``(x, y, z)`` of the half grid whose
    union is ``box.dealias_mask`` (``kept``) and its complement (``dropped``), all disjoint.
    """
    (nx, ny, _), (mx, my, mz) = box.grid, box.max_kept_modes
    nzh = box.spectral_shape[2]

    def ranges(n, m):  # kept indices of FFT order 0..m and n-m..n-1, and the dropped middle
        kept = [slice(0, m + 1)] + ([slice(n - m, n)] if m > 0 else [])
        return kept, slice(m + 1, n - m)

    (xs, x_mid), (ys, y_mid) = ranges(nx, mx), ranges(ny, my)
    z_kept, z_rest = slice(0, mz + 1), slice(mz + 1, nzh)
    kept = [(x, y, z_kept) for x in xs for y in ys]
    dropped = [(slice(None), slice(None), z_rest), (x_mid, slice(None), z_kept)]
    dropped += [(x, y_mid, z_kept) for x in xs]
    return kept, dropped


class InductionOperator:
    """``N(t, b_hat) = (curl(u x B))_hat`` on the dealiased band; buffers allocated once.

    Parameters
    ----------
    box, flow, engine:
        The box, a flow (see :mod:`kindyn.flows.base`) and a transform engine with 3 components.
    eta:
        Magnetic diffusivity; :attr:`decay_rates` is ``eta |k|^2``.

    Two entry points: ``operator(t, b_hat, out)`` on full half-grid arrays (``out`` is zero outside
    the band), and :meth:`packed` on the band values packed as :attr:`support` describes (used by
    the stepper).
    """

    def __init__(self, box, flow, engine, eta: float):
        self.box, self.flow, self.engine, self.eta = box, flow, engine, float(eta)
        real_dtype, complex_dtype = engine.real.dtype, engine.spectral.dtype
        self.decay_rates = (self.eta * box.k_squared).astype(real_dtype)
        self.mask = box.dealias_mask.astype(real_dtype)
        kept, self._dropped = band_blocks(box)
        self.support = BlockSupport(kept, box.spectral_shape)
        # the pyfftw engine can skip the 1/N pass of its forward transform; other engines normalise
        self._unnormalised = getattr(engine, "unnormalised_forward", False)
        scale = 1.0 / box.points if self._unnormalised else 1.0
        kx, ky, kz = box.wavenumbers
        self._ik_blocks = [tuple((1j * k[_axis_slice(block, a)]).astype(complex_dtype)
                                 for a, k in enumerate((kx, ky, kz))) for block in self.support.blocks]
        self._ik_scaled_blocks = [tuple((c * scale).astype(complex_dtype) for c in coeffs)
                                  for coeffs in self._ik_blocks]
        self._components, self._components_time = None, None  # u_x, u_y, u_z as the flow returns them
        self._last_stage_time = None  # for renovating flows, see _evaluation_time
        plane = box.shape[1] * box.shape[2] * np.dtype(real_dtype).itemsize
        width = max(1, SLAB_BYTES // plane)
        self._slabs = [slice(i, min(i + width, box.shape[0])) for i in range(0, box.shape[0], width)]
        self._scratch_real = tuple(np.empty((width, *box.shape[1:]), real_dtype) for _ in range(3))
        self._scratch_hat = np.empty(max(self.support.sizes, default=1), complex_dtype)
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
        """Write ``(curl(u(t) x B))_hat`` for the field ``b_hat`` (full half grid) into ``out``."""
        np.copyto(self.engine.spectral, b_hat)
        self._emf_hat(t)
        for block in self._dropped:
            out[(slice(None), *block)] = 0
        self._curl_on_blocks(self.engine.spectral, self.support.full_views(out), self._ik_scaled_blocks)
        self.evaluations += 1
        return out

    def packed(self, t: float, b_band: np.ndarray, out: np.ndarray) -> np.ndarray:
        """As ``__call__`` for a field given by its band values ``b_band`` (``(3, support.size)``,
        packed; zero outside the band); writes the band values of the result into ``out``."""
        spectral = self.engine.spectral
        spectral.fill(0)  # the whole buffer: a contiguous fill is faster than the strided complement
        for view, values in zip(self.support.full_views(spectral), self.support.packed_views(b_band)):
            np.copyto(view, values)
        self._emf_hat(t)
        self._curl_on_blocks(spectral, self.support.packed_views(out), self._ik_scaled_blocks)
        self.evaluations += 1
        return out

    def _emf_hat(self, t: float) -> None:
        """``engine.spectral <- (u(t) x B)_hat`` for ``B_hat`` in ``engine.spectral`` (``N`` times
        that on the unnormalised path)."""
        engine, u = self.engine, self.velocity_components(self._evaluation_time(t))
        engine.backward()
        b = engine.real
        for slab in self._slabs:  # in place, slab by slab: B is read once and written once
            u0, u1, u2 = (c if c.shape[0] == 1 else c[slab] for c in u)
            b0, b1, b2 = b[0, slab], b[1, slab], b[2, slab]
            s0, s1, tmp = (a[: slab.stop - slab.start] for a in self._scratch_real)
            np.multiply(u1, b2, out=s0)
            np.multiply(u2, b1, out=tmp)
            s0 -= tmp                       # (u x B)_x
            np.multiply(u2, b0, out=s1)
            np.multiply(u0, b2, out=tmp)
            s1 -= tmp                       # (u x B)_y
            np.multiply(u1, b0, out=tmp)
            np.multiply(u0, b1, out=b2)
            b2 -= tmp                       # (u x B)_z, written over B_z (no longer needed)
            np.copyto(b0, s0)
            np.copyto(b1, s1)
        if self._unnormalised:
            engine.forward(normalise=False)
        else:
            engine.forward()

    def _curl_on_blocks(self, e_hat: np.ndarray, outs, coefficients) -> None:
        """``out_b = (i k x e_hat)`` on each band block ``b`` (``outs[b]`` shaped like the block;
        ``coefficients[b]`` hold ``i k`` on the block, possibly scaled)."""
        for block, out, (ikx, iky, ikz) in zip(self.support.blocks, outs, coefficients):
            e = e_hat[(slice(None), *block)]
            tmp = self._scratch_hat[: out[0].size].reshape(out.shape[1:])
            for i, (ka, a, kb, c) in enumerate(((iky, 2, ikz, 1), (ikz, 0, ikx, 2), (ikx, 1, iky, 0))):
                np.multiply(e[a], ka, out=out[i])
                np.multiply(e[c], kb, out=tmp)
                out[i] -= tmp


def _axis_slice(block, axis: int) -> tuple:
    """Index of a broadcastable wavenumber array (``(n,1,1)``, ``(1,n,1)`` or ``(1,1,n)``) on a block."""
    index = [slice(None)] * 3
    index[axis] = block[axis]
    return tuple(index)
