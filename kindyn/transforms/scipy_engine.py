"""scipy.fft engine: the fallback when pyfftw is unavailable or unwanted (same buffer protocol)."""

from __future__ import annotations

import numpy as np
import scipy.fft

from kindyn.box import Box


class ScipyEngine:
    """Batched 3-D transforms with ``scipy.fft.rfftn``/``irfftn`` (``norm="forward"``)."""

    name = "scipy"

    def __init__(self, box: Box, settings, ncomp: int = 3):
        from kindyn.transforms import PRECISIONS

        real_dtype, complex_dtype = PRECISIONS[settings.precision]
        self.box, self.ncomp, self.workers = box, ncomp, settings.threads
        self.real = np.zeros((ncomp, *box.shape), dtype=real_dtype)
        self.spectral = np.zeros((ncomp, *box.spectral_shape), dtype=complex_dtype)

    def forward(self) -> None:
        self.spectral[...] = scipy.fft.rfftn(self.real, axes=(1, 2, 3), norm="forward",
                                             workers=self.workers)

    def backward(self) -> None:
        self.real[...] = scipy.fft.irfftn(self.spectral, s=self.box.shape, axes=(1, 2, 3),
                                          norm="forward", workers=self.workers)
