"""Fourier transform engines behind one small protocol.

Every engine owns two buffers and moves data between them:

* ``engine.real``     physical space, shape ``(ncomp, nx, ny, nz)``, float64 (float32 in single precision)
* ``engine.spectral`` half grid, shape ``(ncomp, nx, ny, nz//2+1)``, complex128 (complex64)

``engine.forward()`` transforms ``real -> spectral`` and ``engine.backward()`` transforms
``spectral -> real``. The forward transform is normalised by ``1/(nx ny nz)`` so that the spectral
buffer holds Fourier coefficients (``f = sum f_hat exp(i k.x)``); the backward transform is the
plain sum. ``backward`` may overwrite ``spectral`` (complex-to-real transforms destroy their
input); callers copy into the buffer and never keep references to it. Hot paths write straight into
the buffers; :func:`spectral_from_physical` and :func:`physical_from_spectral` are convenience
copies for everything else.

Engines: ``"fftw"`` (pyfftw plans, default) and ``"scipy"`` (scipy.fft, fallback).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kindyn.box import Box

ENGINES = ("fftw", "scipy")
PRECISIONS = {"double": (np.float64, np.complex128), "single": (np.float32, np.complex64)}
PLANNING_EFFORTS = ("estimate", "measure", "patient")


@dataclass(frozen=True)
class TransformSettings:
    """How to compute on the grid: transform engine, threads, FFTW planning effort, floating precision
    and the array-kernel set of the step's other passes (:mod:`kindyn.array_kernels`)."""

    engine: str = "fftw"
    threads: int = 1
    planning: str = "measure"
    precision: str = "double"
    array_kernels: str = "auto"


def make_engine(box: Box, settings: TransformSettings = TransformSettings(), ncomp: int = 3):
    """Build the engine named in ``settings`` for ``ncomp`` components on ``box``."""
    if settings.engine == "fftw":
        from kindyn.transforms.fftw import FFTWEngine

        return FFTWEngine(box, settings, ncomp)
    if settings.engine == "scipy":
        from kindyn.transforms.scipy_engine import ScipyEngine

        return ScipyEngine(box, settings, ncomp)
    raise ValueError(f"unknown transform engine {settings.engine!r}; expected one of {ENGINES}")


def spectral_from_physical(engine, field: np.ndarray) -> np.ndarray:
    """Fourier coefficients of ``field`` (shape ``engine.real.shape``); returns a new array."""
    engine.real[...] = field
    engine.forward()
    return engine.spectral.copy()


def physical_from_spectral(engine, field_hat: np.ndarray) -> np.ndarray:
    """Physical values of ``field_hat`` (shape ``engine.spectral.shape``); returns a new array."""
    engine.spectral[...] = field_hat
    engine.backward()
    return engine.real.copy()
