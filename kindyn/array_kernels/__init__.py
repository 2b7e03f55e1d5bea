"""Array kernels of the time step's hot path, outside the FFTs, in two interchangeable sets.

A pseudo-spectral step spends its time in the FFTs and in a few passes over whole arrays: the
cross product ``u x B`` on the grid, the spectral curl, scattering the stepped band values into the
transform buffer, and the Runge–Kutta stage sums. With plain numpy each of these is several passes
over memory on one thread; fused, multi-threaded loops make them a small fraction of the FFT time.

* ``"numpy"`` (:mod:`kindyn.array_kernels.numpy_kernels`): always available; blocked so that
  operands stay in cache; one thread.
* ``"numba"`` (:mod:`kindyn.array_kernels.numba_kernels`): the same operations as fused loops
  compiled by numba, on ``threads`` threads. Optional (``pip install "kindyn[fast]"``); compiled on
  first use and cached on disk.

``"auto"`` takes numba when it can be imported, numpy otherwise. Both sets compute the same
arithmetic in the same order (no fused multiply-add, no fast-math), so results agree to round-off
(tests compare them).

Layouts, shared by both sets:

* physical fields ``(3, nx, ny, nz)``; velocity components 3-D arrays that broadcast to ``(nx, ny, nz)``;
* spectral fields ``(3, nx, ny, nz//2+1)``;
* band values packed as a :class:`~kindyn.stepping.integrating_factor.BlockSupport` (``support``)
  says: its blocks one after the other. The 2/3-rule band is made of whole lines along ``z`` from
  ``m_z = 0``, so the support also has a line table: line ``(i, j)`` starts at
  ``support.line_start[i, j]`` of the packed axis (``-1``: outside the band) and is
  ``support.line_length`` long. The numba set visits the band line by line, the numpy set block
  by block.

OpenMP waiting. pyfftw's FFTW threads and numba's parallel loops are two OpenMP pools that take
turns on the same cores. By default a GNU OpenMP worker spins for a long while after its loop, so
each pool's idle workers take the cores the other pool needs next (on two cores the 64^3 step ran
four times slower than with numpy alone). A short spin (``GOMP_SPINCOUNT=10000``, some
microseconds) or sleeping at once (``OMP_WAIT_POLICY=passive``) avoids that; either must be set
before the runtimes start, i.e. in the environment of the process. The ``kindyn`` command does it
(:func:`configure_openmp_wait`). Whether more than one thread then pays (it does not on small
grids, nor where the pools were started with the long spin) is measured, not guessed:
:func:`choose_threads` times whole operator evaluations on one thread and on ``threads``, as FFTW
times its candidate plans.
"""

from __future__ import annotations

import importlib.util
import os
import time

import numpy as np

from kindyn.errors import KindynError

KERNEL_SETS = ("auto", "numba", "numpy")


class KernelsUnavailable(KindynError):
    """The kernel set asked for cannot be used here (e.g. numba is not installed)."""


SHORT_SPIN = "10000"  # GOMP_SPINCOUNT: busy-wait iterations before an idle OpenMP worker sleeps


def configure_openmp_wait(environ=None) -> None:
    """Entry points only, before pyfftw or numba start OpenMP: a short spin unless the user chose,
    and only where numba is installed (without it there is only FFTW's pool)."""
    environ = os.environ if environ is None else environ
    if "OMP_WAIT_POLICY" not in environ and "GOMP_SPINCOUNT" not in environ and numba_installed():
        environ["GOMP_SPINCOUNT"] = SHORT_SPIN


def choose_threads(kernels, evaluate, repeats: int = 3) -> int:
    """Set ``kernels.threads`` to the faster of 1 and ``kernels.threads`` for ``evaluate()``.

    ``evaluate`` is a callable without arguments doing the work the kernels serve (one operator
    evaluation, FFTs included). Each candidate is timed ``repeats`` times after one warm-up call
    (which also compiles); the smallest time counts. Returns the chosen number of threads.
    """
    candidates = sorted({1, kernels.threads})
    if len(candidates) == 1:
        return kernels.threads
    best = {}
    for threads in candidates:
        kernels.threads = threads
        evaluate()
        times = []
        for _ in range(repeats):
            start = time.perf_counter()
            evaluate()
            times.append(time.perf_counter() - start)
        best[threads] = min(times)
    kernels.threads = min(candidates, key=lambda n: (best[n], n))
    return kernels.threads


def numba_unavailable_reason() -> str | None:
    """Why the numba kernels cannot be loaded here (not installed, no usable compiler cache, JIT
    disabled by ``NUMBA_DISABLE_JIT``), or None when they can."""
    try:
        from kindyn.array_kernels.numba_kernels import JIT_ENABLED
    except (ImportError, RuntimeError, OSError) as error:
        return f"numba cannot be loaded: {error}"
    return None if JIT_ENABLED else "numba's compiler is disabled (NUMBA_DISABLE_JIT)"


def numba_available() -> bool:
    return numba_unavailable_reason() is None


def numba_installed() -> bool:
    """Whether a numba package is present at all (without importing it)."""
    return importlib.util.find_spec("numba") is not None


def make_kernels(choice: str = "auto", threads: int = 1, real_dtype=np.float64):
    """The kernel set named ``choice`` (one of :data:`KERNEL_SETS`) for fields of ``real_dtype``
    (float64 or float32, and the matching complex type), on ``threads`` threads (the numpy set
    always on one; see :func:`choose_threads` for when more pay).

    The numba set is compiled (or loaded from the disk cache) and tried on small arrays here, so
    that a numba that imports but cannot compile fails now: ``"numba"`` then raises
    :class:`KernelsUnavailable`, ``"auto"`` falls back to numpy and says why in ``fallback_reason``.
    """
    from kindyn.array_kernels.numpy_kernels import NumpyKernels

    if choice not in KERNEL_SETS:
        raise ValueError(f"unknown kernel set {choice!r}; expected one of {KERNEL_SETS}")
    if choice == "numpy":
        return NumpyKernels()
    reason = numba_unavailable_reason()
    if reason is None:
        from kindyn.array_kernels.numba_kernels import NumbaKernels

        kernels = NumbaKernels(threads)
        try:
            kernels.warm_up(np.dtype(real_dtype))
            return kernels
        except Exception as error:  # numba's typing, lowering and threading-layer errors
            reason = f"the numba kernels failed to compile or run: {type(error).__name__}: {error}"
    if choice == "numba":
        raise KernelsUnavailable(f"{reason}; install numba with pip install \"kindyn[fast]\" or set "
                                 f"numerics.array_kernels = \"numpy\"")
    fallback = NumpyKernels()
    if numba_installed():  # installed but unusable: worth saying; not installed: the user's choice
        fallback.fallback_reason = reason.splitlines()[0][:200]
    return fallback
