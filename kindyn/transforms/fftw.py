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
        flags = (_FLAGS[settings.planning],)
        axes = (1, 2, 3)
        self._forward = pyfftw.FFTW(self.real, self.spectral, axes=axes, direction="FFTW_FORWARD",
                                    flags=flags, threads=settings.threads)
        self._backward = pyfftw.FFTW(self.spectral, self.real, axes=axes, direction="FFTW_BACKWARD",
                                     flags=flags + ("FFTW_DESTROY_INPUT",), threads=settings.threads)
        self._scale = real_dtype(1.0 / box.points)
        self.real.fill(0)
        self.spectral.fill(0)

    def forward(self, normalise: bool = True) -> None:
        """``spectral <- FFT(real) / N`` (``normalise=False``: the plain sum, ``N`` times larger)."""
        self._forward.execute()
        if normalise:
            np.multiply(self.spectral, self._scale, out=self.spectral)

    def backward(self) -> None:
        """``real <- inverse FFT(spectral)`` (unnormalised sum); destroys ``spectral``."""
        self._backward.execute()
