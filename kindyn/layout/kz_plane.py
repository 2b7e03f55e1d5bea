"""The single-k_z reduction ("planar" method) of a z-independent flow at one vertical wavenumber (protocol: :mod:`kindyn.layout`).

When ``u = u(x, y, t)`` each vertical wavenumber evolves on its own:
``B(x, y, z, t) = b(x, y, t) exp(i k_z z)`` (real field ``Re B``), with complex ``b`` on the
``nx x ny`` grid of the plane ``Lx x Ly`` and ``d/dz -> i k_z``. The layout holds ``b`` as a 3-D
array with a single ``z`` plane, so that the induction operator, the array kernels and the stepper
of the 3-D box serve it unchanged:

* physical arrays ``(components, nx, ny, 1)``, complex (the amplitude ``b`` at ``z = 0``);
* spectral arrays ``(components, nx, ny, 1)``, complex: full 2-D FFT (no Hermitian symmetry,
  ``b`` is complex), ``m_x, m_y`` in FFT order; ``b(x, y) = sum b_hat exp(i (k_x x + k_y y))``;
* wavenumbers ``(k_x, k_y, k_z)`` with ``k_z`` the fixed vertical wavenumber on the one plane;
* 2/3 rule in ``x`` and ``y``; Parseval weight 1 (``<|b|^2> = sum |b_hat|^2``);
* ``k = 0`` exists only when ``k_z = 0``.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from kindyn.box import fft_mode_numbers, kept_by_two_thirds, kept_index_ranges, max_kept_mode
from kindyn.errors import FlowError
from kindyn.layout.spectral import band_support, packed_entries, velocity_components
from kindyn.transforms import TransformSettings
from kindyn.transforms.plane import make_plane_engine


@dataclass(frozen=True)
class KzPlane:
    """Periodic ``Lx x Ly`` plane sampled on ``nx x ny`` points, for one vertical wavenumber ``kz``."""

    lengths: tuple[float, float]
    grid: tuple[int, int]
    kz: float

    def __post_init__(self):
        object.__setattr__(self, "lengths", tuple(float(v) for v in self.lengths))
        object.__setattr__(self, "grid", tuple(int(v) for v in self.grid))
        object.__setattr__(self, "kz", float(self.kz))
        if len(self.lengths) != 2 or len(self.grid) != 2 or min(self.lengths) <= 0 or min(self.grid) < 1:
            raise ValueError("a planar grid needs two positive lengths and two positive grid sizes")

    @property
    def shape(self) -> tuple[int, int]:
        return self.grid

    def axis(self, i: int) -> np.ndarray:
        return np.arange(self.grid[i]) * (self.lengths[i] / self.grid[i])

    @property
    def max_kept_wavenumbers(self) -> tuple[float, float, float]:
        return tuple(2 * np.pi * max_kept_mode(n) / L for n, L in zip(self.grid, self.lengths)) + (abs(self.kz),)


class _PlaneEngine:
    """A planar engine seen through 3-D buffers ``(components, nx, ny, 1)`` (views of its own)."""

    unnormalised_forward = True

    def __init__(self, engine):
        self._engine = engine
        self.name, self.ncomp = engine.name, engine.ncomp
        self.real = engine.physical[..., None]
        self.spectral = engine.spectral[..., None]
        self.forward, self.backward = engine.forward, engine.backward


class KzPlaneLayout:
    """The plane of :class:`KzPlane` ``grid`` in this process (serial; reductions are the identity)."""

    processes = 1
    real_dtype = np.dtype(np.float64)
    complex_dtype = np.dtype(np.complex128)

    def __init__(self, grid: KzPlane, transforms: TransformSettings = TransformSettings()):
        self.plane, self.transforms = grid, transforms
        self._engines = {}

    @property
    def lengths(self):
        return self.plane.lengths

    @property
    def grid(self):
        return self.plane.grid

    @property
    def kz(self) -> float:
        return self.plane.kz

    @property
    def points(self) -> int:
        return self.grid[0] * self.grid[1]

    @property
    def max_kept_wavenumbers(self):
        return self.plane.max_kept_wavenumbers

    @property
    def physical_shape(self) -> tuple[int, int, int]:
        return (*self.grid, 1)

    @property
    def spectral_shape(self) -> tuple[int, int, int]:
        return (*self.grid, 1)

    @cached_property
    def coordinates(self):
        return (self.plane.axis(0)[:, None, None], self.plane.axis(1)[None, :, None], np.zeros((1, 1, 1)))

    @cached_property
    def mode_numbers(self):
        nx, ny = self.grid
        return (fft_mode_numbers(nx)[:, None, None], fft_mode_numbers(ny)[None, :, None], np.zeros((1, 1, 1), int))

    @cached_property
    def wavenumbers(self):
        mx, my, _ = self.mode_numbers
        return (2 * np.pi * mx / self.lengths[0], 2 * np.pi * my / self.lengths[1], np.full((1, 1, 1), self.kz))

    @cached_property
    def k_squared(self) -> np.ndarray:
        kx, ky, kz = self.wavenumbers
        return kx**2 + ky**2 + kz**2

    @cached_property
    def dealias_mask(self) -> np.ndarray:
        (mx, my, _), (nx, ny) = self.mode_numbers, self.grid
        return kept_by_two_thirds(mx, nx) & kept_by_two_thirds(my, ny) & np.ones((1, 1, 1), bool)

    @cached_property
    def parseval_weights(self) -> np.ndarray:
        return np.ones(self.spectral_shape)

    @cached_property
    def band(self):
        nx, ny = self.grid
        return band_support((kept_index_ranges(nx), kept_index_ranges(ny), 1), self.spectral_shape)

    @property
    def uniform_mode(self):
        return (0, 0, 0) if self.kz == 0 else None

    def band_entries(self, mask: np.ndarray) -> np.ndarray:
        return packed_entries(self.band, mask)

    def engine(self, components: int = 3, purpose: str = "operator"):
        """The transform engine for ``components`` components and a purpose (as in
        :meth:`kindyn.layout.BoxLayout.engine`)."""
        key = (components, purpose)
        if key not in self._engines:
            t = self.transforms
            self._engines[key] = _PlaneEngine(make_plane_engine(self.grid, components, t.engine, t.threads, t.planning))
        return self._engines[key]

    def physical_from_modes(self, modes, coefficients) -> np.ndarray:
        """``u = sum_r 2 Re(c_r exp(i k_r.x))`` on the plane, for modes with ``m_z = 0`` only."""
        modes, c = np.asarray(modes, int), np.asarray(coefficients, complex)
        if np.any(modes[:, 2] != 0):
            raise FlowError("the planar reduction needs a z-independent flow (Fourier modes with m_z = 0)")
        nx, ny = self.grid
        u_hat = np.zeros((3, nx, ny), complex)
        np.add.at(u_hat, (slice(None), modes[:, 0] % nx, modes[:, 1] % ny), c.T)
        np.add.at(u_hat, (slice(None), (-modes[:, 0]) % nx, (-modes[:, 1]) % ny), np.conj(c).T)
        engine = self.engine(3, "conversion")
        engine.spectral[...] = u_hat[..., None]
        engine.backward()
        return engine.real.real.copy()

    def physical_from_coefficients(self, u_hat: np.ndarray) -> np.ndarray:
        """The ``z = 0`` plane of a field given by 3-D half-grid coefficients: its ``m_z = 0`` plane on
        the same ``(nx, ny)`` grid (the planar reduction needs a z-independent flow); ``None`` on another
        grid (the flow is then evaluated on the plane's points)."""
        u_hat = np.asarray(u_hat)
        if u_hat.shape[1:3] != tuple(self.grid):
            return None
        if np.any(u_hat[..., 1:] != 0):
            raise FlowError("the planar reduction needs a z-independent flow")
        engine = self.engine(3, "conversion")
        engine.spectral[...] = u_hat[..., :1]
        engine.backward()
        return engine.real.real.copy()

    def velocity_components(self, flow, t: float, dtype=None):
        return velocity_components(self, flow, t, dtype or self.real_dtype)

    def sample_velocity(self, flow, t: float) -> np.ndarray:
        out = np.empty((3, *self.physical_shape))
        for i, c in enumerate(velocity_components(self, flow, t, np.float64)):
            out[i] = c
        return out

    def total(self, value):
        return value

    def maximum(self, value):
        return value

    def mean_square(self, v_hat: np.ndarray) -> float:
        """``<|b|^2>`` of the complex planar amplitude (Parseval weight 1)."""
        return float(self.total(sum(np.sum(c.real**2 + c.imag**2) for c in v_hat)))

    def energy(self, b_hat: np.ndarray) -> float:
        return 0.5 * self.mean_square(b_hat)
