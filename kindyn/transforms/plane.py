"""Complex two-dimensional transform engines for the single-k_z reduction of z-independent flows.

A field ``B(x, y, z) = b(x, y) exp(i k_z z)`` is held by its complex planar amplitude ``b``. An
engine owns two complex buffers and moves data between them, like the 3-D engines of
:mod:`kindyn.transforms`:

* ``engine.physical`` planar amplitude on the grid, shape ``(ncomp, nx, ny)``, complex128
* ``engine.spectral`` its Fourier coefficients, shape ``(ncomp, nx, ny)``, complex128 (FFT order
  ``m = 0, 1, .., -1`` on both axes; no Hermitian symmetry, since ``b`` is complex)

``forward()`` computes ``spectral <- FFT2(physical) / (nx ny)`` so that
``b(x, y) = sum b_hat(m) exp(i (k_x x + k_y y))``; ``forward(normalise=False)`` leaves out the
``1/(nx ny)`` (for callers that fold it into a spectral factor); ``backward()`` is the plain inverse
sum and leaves ``spectral`` intact (out-of-place complex transforms).

Engines: ``"fftw"`` (pyfftw plans, made before the buffers are filled) and ``"scipy"``
(``scipy.fft``); :func:`make_plane_engine` falls back to scipy when pyfftw is missing.
"""

from __future__ import annotations

import numpy as np
import scipy.fft

class ScipyPlaneEngine:
    """Batched complex 2-D transforms over axes ``(1, 2)`` with ``scipy.fft``."""

    name = "scipy"

    def __init__(self, grid: tuple[int, int], ncomp: int = 3, threads: int = 1):
        nx, ny = checked_plane(grid)
        self.grid, self.ncomp, self.workers = (nx, ny), ncomp, int(threads)
        self.physical = np.zeros((ncomp, nx, ny), dtype=np.complex128)
        self.spectral = np.zeros((ncomp, nx, ny), dtype=np.complex128)

    def forward(self, normalise: bool = True) -> None:
        self.spectral[...] = scipy.fft.fft2(self.physical, axes=(1, 2), norm="forward" if normalise else "backward",
                                            workers=self.workers)

    def backward(self) -> None:
        self.physical[...] = scipy.fft.ifft2(self.spectral, axes=(1, 2), norm="forward", workers=self.workers)


def make_plane_engine(grid, ncomp: int = 3, engine: str = "fftw", threads: int = 1, planning: str = "measure"):
    """The planar engine named ``engine`` (``"fftw"`` falls back to ``"scipy"`` without pyfftw)."""
    if engine == "fftw":
        try:
            from kindyn.transforms.fftw import FFTWPlaneEngine
        except ImportError:
            pass
        else:
            return FFTWPlaneEngine(grid, ncomp, threads, planning)
    elif engine != "scipy":
        raise ValueError(f"unknown planar transform engine {engine!r}; expected 'fftw' or 'scipy'")
    return ScipyPlaneEngine(grid, ncomp, threads)


def checked_plane(grid) -> tuple[int, int]:
    """``(nx, ny)`` as positive integers, or ValueError."""
    nx, ny = (int(n) for n in grid)
    if nx < 1 or ny < 1:
        raise ValueError(f"planar grid sizes must be positive, got {grid}")
    return nx, ny
