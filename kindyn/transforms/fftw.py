"""pyfftw engine: one batched real-to-complex and one complex-to-real plan, built once.

Beyond the buffer protocol of :mod:`kindyn.transforms` (``real``, ``spectral``, normalised
``forward()``, ``backward()``), this engine offers ``forward(normalise=False)``: the plain sum
``sum_x f(x) exp(-i k.x)``, ``N = nx ny nz`` times the Fourier coefficients
(:attr:`FFTWEngine.unnormalised_forward` says so). A caller that multiplies the result by a spectral
factor anyway (the induction operator's curl) folds ``1/N`` into that factor and saves one pass over
the spectral buffer; every other caller keeps the normalised default.

Planning (``measure``/``patient``) overwrites the buffers, so plans are made before anything is
stored in them. FFTW runs on ``settings.threads`` threads.
"""

from __future__ import annotations

import numpy as np
import pyfftw

from kindyn.box import Box

_FLAGS = {"estimate": "FFTW_ESTIMATE", "measure": "FFTW_MEASURE", "patient": "FFTW_PATIENT"}


class PlanPair:
    """A forward and a backward FFTW plan between two buffers, with the ``1/N`` normalisation.

    Shared by the 3-D real engine here and the complex engine of the single-k_z reduction
    (:mod:`kindyn.transforms.plane`). ``destroy_input`` lets the backward plan overwrite
    ``spectral`` (required for fast multi-dimensional complex-to-real transforms).
    """

    def __init__(self, physical, spectral, axes, planning: str, threads: int, points: int,
                 destroy_input: bool = False):
        flags = (_FLAGS[planning],)
        self._forward = pyfftw.FFTW(physical, spectral, axes=axes, direction="FFTW_FORWARD",
                                    flags=flags, threads=threads)
        backward_flags = flags + (("FFTW_DESTROY_INPUT",) if destroy_input else ())
        self._backward = pyfftw.FFTW(spectral, physical, axes=axes, direction="FFTW_BACKWARD",
                                     flags=backward_flags, threads=threads)
        self._spectral = spectral
        self._scale = physical.real.dtype.type(1.0 / points)
        physical.fill(0)
        spectral.fill(0)

    def forward(self, normalise: bool = True) -> None:
        """``spectral <- FFT(physical) / N`` (``normalise=False``: the plain sum, ``N`` times larger)."""
        self._forward.execute()
        if normalise:
            np.multiply(self._spectral, self._scale, out=self._spectral)

    def backward(self) -> None:
        """``physical <- inverse FFT(spectral)`` (unnormalised sum)."""
        self._backward.execute()


class FFTWEngine:
    """Batched 3-D transforms over axes ``(1, 2, 3)`` of ``(ncomp, nx, ny, nz)`` buffers."""

    name = "fftw"
    unnormalised_forward = True  # forward(normalise=False) is available

    def __init__(self, box: Box, settings, ncomp: int = 3):
        from kindyn.transforms import PRECISIONS

        real_dtype, complex_dtype = PRECISIONS[settings.precision]
        self.box, self.ncomp, self.threads = box, ncomp, settings.threads
        self.real = pyfftw.empty_aligned((ncomp, *box.shape), dtype=real_dtype)
        self.spectral = pyfftw.empty_aligned((ncomp, *box.spectral_shape), dtype=complex_dtype)
        plans = PlanPair(self.real, self.spectral, (1, 2, 3), settings.planning, settings.threads,
                         box.points, destroy_input=True)
        self.forward = plans.forward    # spectral <- FFT(real)/N; forward(normalise=False): the plain sum
        self.backward = plans.backward  # real <- inverse FFT(spectral); destroys spectral


class FFTWPlaneEngine:
    """Batched complex 2-D transforms over axes ``(1, 2)`` with pyfftw plans built once."""

    name = "fftw"

    def __init__(self, grid: tuple[int, int], ncomp: int = 3, threads: int = 1, planning: str = "measure"):
        from kindyn.transforms.plane import checked_plane

        nx, ny = checked_plane(grid)
        self.grid, self.ncomp = (nx, ny), ncomp
        self.physical = pyfftw.empty_aligned((ncomp, nx, ny), dtype=np.complex128)
        self.spectral = pyfftw.empty_aligned((ncomp, nx, ny), dtype=np.complex128)
        plans = PlanPair(self.physical, self.spectral, (1, 2), planning, threads, nx * ny)
        self.forward = plans.forward    # spectral <- FFT2(physical)/(nx ny); normalise=False: the plain sum
        self.backward = plans.backward  # physical <- inverse FFT2(spectral); spectral kept
