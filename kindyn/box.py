"""The periodic box: lengths, grid, coordinates, wavenumbers, dealiasing mask, Parseval weights.

Conventions
-----------
* Physical arrays have shape ``(nx, ny, nz)`` (vectors: ``(3, nx, ny, nz)``), coordinates
  ``x_j = j Lx / nx`` for ``j = 0 .. nx-1`` (no endpoint).
* Spectral arrays live on the real-to-complex half grid ``(nx, ny, nz//2 + 1)``: the last axis
  holds ``kz = 2 pi m / Lz`` for ``m = 0 .. nz//2``; the first two axes hold ``m`` in FFT order
  (``0, 1, .., -1``). Coefficients are normalised so that ``f(x) = sum_k f_hat(k) exp(i k.x)``.
* Dealiasing is the 2/3 rule: a mode is kept when ``|m_i| < n_i / 3`` on every axis, so that a
  quadratic product of kept modes never aliases onto a kept mode. Nyquist modes of even grids are
  therefore always removed.
* Parseval: ``<f g> = sum over the half grid of w * Re(conj(f_hat) g_hat)`` with weight ``w = 2``
  for ``0 < m_z < nz/2`` and ``w = 1`` for ``m_z = 0`` and the even-grid Nyquist plane.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np


def fft_mode_numbers(n: int) -> np.ndarray:
    """Integer mode numbers of an ``n``-point transform in FFT order (``0, 1, .., -1``)."""
    return np.fft.fftfreq(n, 1.0 / n).astype(int)


def kept_by_two_thirds(m: np.ndarray, n: int) -> np.ndarray:
    """The 2/3 rule on one axis: mode ``m`` of an ``n``-point grid is kept when ``3 |m| < n``."""
    return 3 * np.abs(m) < n


def max_kept_mode(n: int) -> int:
    """Largest mode number the 2/3 rule keeps on an ``n``-point axis."""
    return (n - 1) // 3


def kept_index_ranges(n: int) -> list[slice]:
    """Indices (FFT order) of an ``n``-point axis that the 2/3 rule keeps, as contiguous ranges:
    modes ``0 .. m`` and ``-m .. -1`` with ``m = max_kept_mode(n)`` (one range when ``m = 0``)."""
    m = max_kept_mode(n)
    return [slice(0, m + 1)] + ([slice(n - m, n)] if m > 0 else [])


@dataclass(frozen=True)
class Box:
    """Triply periodic box ``[0, Lx) x [0, Ly) x [0, Lz)`` sampled on an ``nx x ny x nz`` grid."""

    lengths: tuple[float, float, float] = (2 * np.pi, 2 * np.pi, 2 * np.pi)
    grid: tuple[int, int, int] = (32, 32, 32)

    def __post_init__(self):
        object.__setattr__(self, "lengths", tuple(float(v) for v in self.lengths))
        object.__setattr__(self, "grid", tuple(int(v) for v in self.grid))
        if len(self.lengths) != 3 or len(self.grid) != 3:
            raise ValueError("Box needs three lengths and three grid sizes")
        if min(self.lengths) <= 0 or min(self.grid) < 1:
            raise ValueError("Box lengths and grid sizes must be positive")

    # --- physical space -------------------------------------------------------------------
    @property
    def shape(self) -> tuple[int, int, int]:
        return self.grid

    @property
    def points(self) -> int:
        return int(np.prod(self.grid))

    @property
    def spacing(self) -> tuple[float, float, float]:
        return tuple(L / n for L, n in zip(self.lengths, self.grid))

    @property
    def volume(self) -> float:
        return float(np.prod(self.lengths))

    def axis(self, i: int) -> np.ndarray:
        """1-D coordinates of axis ``i`` (no endpoint)."""
        return np.arange(self.grid[i]) * (self.lengths[i] / self.grid[i])

    @cached_property
    def coordinates(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Broadcastable coordinates ``x (nx,1,1)``, ``y (1,ny,1)``, ``z (1,1,nz)``."""
        return (self.axis(0)[:, None, None], self.axis(1)[None, :, None], self.axis(2)[None, None, :])

    # --- spectral space -------------------------------------------------------------------
    @property
    def spectral_shape(self) -> tuple[int, int, int]:
        nx, ny, nz = self.grid
        return (nx, ny, nz // 2 + 1)

    @cached_property
    def mode_numbers(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Integer mode numbers ``m`` (broadcastable, half grid on the last axis)."""
        nx, ny, nz = self.grid
        mx, my = fft_mode_numbers(nx), fft_mode_numbers(ny)
        mz = np.arange(nz // 2 + 1)
        return (mx[:, None, None], my[None, :, None], mz[None, None, :])

    @cached_property
    def wavenumbers(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Broadcastable wavenumbers ``k_i = 2 pi m_i / L_i``."""
        return tuple(2 * np.pi * m / L for m, L in zip(self.mode_numbers, self.lengths))

    @cached_property
    def k_squared(self) -> np.ndarray:
        """``|k|^2`` on the half grid, shape ``spectral_shape``."""
        kx, ky, kz = self.wavenumbers
        return kx**2 + ky**2 + kz**2

    @cached_property
    def dealias_mask(self) -> np.ndarray:
        """Boolean mask of the modes kept by the 2/3 rule (``3 |m_i| < n_i`` on every axis)."""
        mx, my, mz = self.mode_numbers
        nx, ny, nz = self.grid
        return kept_by_two_thirds(mx, nx) & kept_by_two_thirds(my, ny) & kept_by_two_thirds(mz, nz)

    @property
    def max_kept_modes(self) -> tuple[int, int, int]:
        """Largest mode number kept on each axis by the 2/3 rule."""
        return tuple(max_kept_mode(n) for n in self.grid)

    @property
    def max_kept_wavenumbers(self) -> tuple[float, float, float]:
        return tuple(2 * np.pi * m / L for m, L in zip(self.max_kept_modes, self.lengths))

    @cached_property
    def parseval_weights(self) -> np.ndarray:
        """Weights ``w`` with ``<f g> = sum w Re(conj f_hat g_hat)`` on the half grid."""
        nz = self.grid[2]
        w = np.full(self.spectral_shape[2], 2.0)
        w[0] = 1.0
        if nz % 2 == 0:
            w[-1] = 1.0
        return np.broadcast_to(w[None, None, :], self.spectral_shape)

    @property
    def smallest_wavenumber(self) -> float:
        return 2 * np.pi / max(self.lengths)
