"""The 3-D periodic box held whole by one process (serial layout; protocol in :mod:`kindyn.layout`).

Conventions (stated once for every 3-D layout)
----------------------------------------------
* Physical arrays ``(components, nx, ny, nz)``; coordinates ``x_j = j Lx / nx`` (no endpoint).
* Spectral arrays on the real-to-complex half grid ``(components, nx, ny, nz//2 + 1)``: ``m_x, m_y``
  in FFT order (``0, 1, .., -1``), ``m_z = 0 .. nz//2``; coefficients normalised so that
  ``f(x) = sum_k f_hat(k) exp(i k.x)`` (the forward transform divides by ``nx ny nz``).
* 2/3 rule: a mode is kept when ``3 |m_i| < n_i`` on every axis (even-grid Nyquist modes dropped).
* Parseval: ``<f g> = sum w Re(conj(f_hat) g_hat)`` with ``w = 2`` for ``0 < m_z < nz/2`` and
  ``w = 1`` on the ``m_z = 0`` plane and the even-grid Nyquist plane.
"""

from __future__ import annotations

from functools import cached_property

import numpy as np

from kindyn.box import Box, kept_by_two_thirds, kept_index_ranges
from kindyn.layout.spectral import band_support, packed_entries, velocity_components
from kindyn.transforms import TransformSettings, make_engine


class BoxLayout:
    """The whole box in this process. Reductions are the identity (one process holds everything).

    Parameters
    ----------
    box:
        The geometry (lengths and grid).
    transforms:
        Engine, threads, planning and precision of the transforms (:class:`~kindyn.transforms.TransformSettings`).
    """

    processes = 1
    is_root = True  # the process that reads and writes files and prints

    def __init__(self, box: Box, transforms: TransformSettings = TransformSettings()):
        self.box, self.transforms = box, transforms
        self._engines = {}

    # --- geometry (global) ------------------------------------------------------------------
    @property
    def lengths(self):
        return self.box.lengths

    @property
    def grid(self):
        return self.box.grid

    @property
    def points(self) -> int:
        """Grid points of the whole box (the ``N`` of the transforms' normalisation)."""
        return self.box.points

    @property
    def max_kept_modes(self):
        return self.box.max_kept_modes

    @property
    def max_kept_wavenumbers(self):
        return self.box.max_kept_wavenumbers

    @property
    def smallest_wavenumber(self) -> float:
        return self.box.smallest_wavenumber

    # --- what this process holds ------------------------------------------------------------
    @property
    def physical_shape(self) -> tuple[int, int, int]:
        return self.box.shape

    @property
    def spectral_shape(self) -> tuple[int, int, int]:
        return self.box.spectral_shape

    @cached_property
    def real_dtype(self):
        return np.dtype(np.float32 if self.transforms.precision == "single" else np.float64)

    @cached_property
    def complex_dtype(self):
        return np.result_type(self.real_dtype, np.complex64)

    @cached_property
    def coordinates(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Local broadcastable coordinates ``x (nx,1,1)``, ``y (1,ny,1)``, ``z (1,1,nz)``."""
        return self.box.coordinates

    @cached_property
    def mode_numbers(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Local integer mode numbers (broadcastable; here those of the whole half grid of the box)."""
        return self.box.mode_numbers

    @cached_property
    def wavenumbers(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Local broadcastable wavenumbers ``k_i = 2 pi m_i / L_i``."""
        return tuple(2 * np.pi * m / L for m, L in zip(self.mode_numbers, self.lengths))

    @cached_property
    def k_squared(self) -> np.ndarray:
        kx, ky, kz = self.wavenumbers
        return kx**2 + ky**2 + kz**2

    @cached_property
    def dealias_mask(self) -> np.ndarray:
        """Local boolean mask of the modes kept by the 2/3 rule."""
        (mx, my, mz), (nx, ny, nz) = self.mode_numbers, self.grid
        return kept_by_two_thirds(mx, nx) & kept_by_two_thirds(my, ny) & kept_by_two_thirds(mz, nz)

    @cached_property
    def parseval_weights(self) -> np.ndarray:
        """Local Parseval weights (here those of the whole half grid of the box)."""
        return self.box.parseval_weights

    @cached_property
    def band(self):
        """The kept band, packed (:class:`~kindyn.stepping.integrating_factor.BlockSupport`)."""
        nx, ny, _ = self.grid
        return band_support((kept_index_ranges(nx), kept_index_ranges(ny), self.max_kept_modes[2] + 1),
                            self.spectral_shape)

    @property
    def uniform_mode(self) -> tuple[int, int, int] | None:
        """Local index of ``k = 0`` (``None`` where another process holds it)."""
        return (0, 0, 0)

    def mean_mode_mask(self, axis: int | None) -> np.ndarray:
        """Local boolean mask of the modes that make up an average: the box average (``axis=None``:
        ``k = 0`` only) or the planar average that depends on coordinate ``axis`` (the modes whose
        mode numbers vanish on the two other axes)."""
        m = self.mode_numbers
        others = [0, 1, 2] if axis is None else [i for i in range(3) if i != axis]
        mask = np.ones((1, 1, 1), bool)
        for i in others:
            mask = mask & (m[i] == 0)
        return np.broadcast_to(mask, self.spectral_shape).copy()

    def band_entries(self, mask: np.ndarray) -> np.ndarray:
        """Positions in the packed band of the modes where the local ``mask`` holds."""
        return packed_entries(self.band, mask)

    # --- transforms ---------------------------------------------------------------------------
    def engine(self, components: int = 3, purpose: str = "operator"):
        """The transform engine for ``components`` stacked components (made once per count and
        purpose). The operators' engines are theirs alone: conversions (:meth:`spectral_from_physical`,
        the synthesis of a flow's velocity) use engines of the purpose ``"conversion"``, so that they
        never overwrite an operator's buffers in the middle of an evaluation."""
        key = (components, purpose)
        if key not in self._engines:
            self._engines[key] = make_engine(self.box, self.transforms, components)
        return self._engines[key]

    def spectral_from_physical(self, field: np.ndarray) -> np.ndarray:
        """Fourier coefficients of the local physical ``field`` ``(components, *physical_shape)`` (new array)."""
        engine = self.engine(field.shape[0], "conversion")
        engine.real[...] = field
        engine.forward()
        return engine.spectral.copy()

    def physical_from_spectral(self, field_hat: np.ndarray) -> np.ndarray:
        """Physical values of ``field_hat`` ``(components, *spectral_shape)`` (new array)."""
        engine = self.engine(field_hat.shape[0], "conversion")
        engine.spectral[...] = field_hat
        engine.backward()
        return engine.real.copy()

    def spectral_from_modes(self, modes: np.ndarray, coefficients: np.ndarray) -> np.ndarray:
        """Half-grid coefficients ``(3, *spectral_shape)`` of ``u = sum_r 2 Re(c_r exp(i k_r.x))``.

        ``modes`` are integer mode numbers ``(M, 3)``, ``coefficients`` complex ``(M, 3)``; a mode and its
        opposite must not both be listed. A mode with ``m_z < 0`` is stored as its opposite with the
        conjugate coefficient; on the ``m_z = 0`` plane both members of the pair are filled.
        """
        modes, c = np.asarray(modes, int).copy(), np.asarray(coefficients, complex).copy()
        flip = modes[:, 2] < 0
        modes[flip], c[flip] = -modes[flip], np.conj(c[flip])
        nx, ny, _ = self.grid
        u_hat = np.zeros((3, *self.spectral_shape), dtype=complex)
        ix, iy, iz = modes[:, 0] % nx, modes[:, 1] % ny, modes[:, 2]
        u_hat[:, ix, iy, iz] = c.T
        plane = modes[:, 2] == 0
        u_hat[:, (-modes[plane, 0]) % nx, (-modes[plane, 1]) % ny, 0] = np.conj(c[plane]).T
        return u_hat

    def physical_from_modes(self, modes: np.ndarray, coefficients: np.ndarray) -> np.ndarray:
        """``u = sum_r 2 Re(c_r exp(i k_r.x))`` on the local grid, ``(3, *physical_shape)``."""
        return self.physical_from_spectral(self.spectral_from_modes(modes, coefficients).astype(self.complex_dtype))

    def physical_from_coefficients(self, u_hat: np.ndarray) -> np.ndarray:
        """The field of global half-grid coefficients ``u_hat`` ``(3, nx, ny, nz//2+1)`` on the local grid."""
        return self.physical_from_spectral(np.asarray(u_hat).astype(self.complex_dtype))

    def velocity_components(self, flow, t: float, dtype=None):
        """The flow at ``t`` on the local points (see :func:`kindyn.layout.spectral.velocity_components`)."""
        return velocity_components(self, flow, t, dtype or self.real_dtype)

    def sample_velocity(self, flow, t: float) -> np.ndarray:
        """The flow at ``t`` on the local grid as a full array ``(3, *physical_shape)`` (float64)."""
        out = np.empty((3, *self.physical_shape))
        for i, c in enumerate(velocity_components(self, flow, t, np.float64)):
            out[i] = c
        return out

    # --- whole-grid arrays (a distributed layout gathers and cuts them) ---------------------------
    def local_part(self, global_hat: np.ndarray) -> np.ndarray:
        """This process's block of a whole half-grid array (here: all of it)."""
        return global_hat

    def gather_spectral(self, local_hat: np.ndarray):
        """The whole half-grid array on the first process (here: the array itself)."""
        return local_hat

    def gather_physical(self, local: np.ndarray):
        """The whole physical array on the first process (here: the array itself)."""
        return local

    def standard_normal(self, rng, components: int) -> np.ndarray:
        """The local block of ``rng.standard_normal((components, nx, ny, nz))`` (here: all of it)."""
        return rng.standard_normal((components, *self.physical_shape))

    def probe_vector(self, b_hat: np.ndarray, indices: np.ndarray) -> np.ndarray:
        """Real and imaginary parts of the coefficients at whole-grid flat ``indices`` of every component."""
        picked = b_hat.reshape(b_hat.shape[0], -1)[:, indices]
        return np.concatenate([picked.real.ravel(), picked.imag.ravel()]).astype(float)

    def from_root(self, value):
        """The first process's ``value`` on every process (here: the value itself)."""
        return value

    # --- reductions ---------------------------------------------------------------------------
    def total(self, value):
        """Sum over processes of a local number or array (here: the value itself)."""
        return value

    def maximum(self, value):
        """Maximum over processes of a local number or array (here: the value itself)."""
        return value

    def mean_square(self, v_hat: np.ndarray) -> float:
        """Volume average ``<|v|^2>`` of the real field with coefficients ``v_hat`` (Parseval)."""
        w = self.parseval_weights
        return float(self.total(sum(np.sum(w * (c.real**2 + c.imag**2)) for c in v_hat)))

    def energy(self, b_hat: np.ndarray) -> float:
        """``<|B|^2>/2``."""
        return 0.5 * self.mean_square(b_hat)
