"""The hot-path kernels as fused loops compiled by numba, on ``threads`` threads.

Same operations, arguments and arithmetic order as :mod:`kindyn.array_kernels.numpy_kernels` (layouts:
:mod:`kindyn.array_kernels`); each loop reads and writes every array once. Compiled on first use for each
dtype (a few seconds) and cached on disk next to this module, so later processes load the machine
code. No fast-math: the results match the numpy set to round-off.

Threads: the parallel loops run on ``min(threads, numba.config.NUMBA_NUM_THREADS)`` threads, set
before each call (numba keeps that number per calling thread); see :mod:`kindyn.array_kernels` on
OpenMP waiting and on measuring whether more than one thread pays. Numba's threading layer is OpenMP or
TBB where present and a simple work queue otherwise; the work queue must not be entered from two
Python threads at once, so run several solvers in one process only with one of the former (kindyn's
sweeps run each point in its own process).
"""

from __future__ import annotations

import numba
import numpy as np
from numba import njit, prange

BLOCK = 2048  # entries of the packed axis per parallel chunk in the stage sums
JIT_ENABLED = not numba.config.DISABLE_JIT  # NUMBA_DISABLE_JIT=1 would run the loops as plain Python


@njit(parallel=True, cache=True)
def _cross_in_place(ux, uy, uz, b):
    nx, ny, nz = b.shape[1], b.shape[2], b.shape[3]
    for i in prange(nx):
        for j in range(ny):
            for k in range(nz):
                bx, by, bz = b[0, i, j, k], b[1, i, j, k], b[2, i, j, k]
                x, y, z = ux[i, j, k], uy[i, j, k], uz[i, j, k]
                b[0, i, j, k] = y * bz - z * by
                b[1, i, j, k] = z * bx - x * bz
                b[2, i, j, k] = x * by - y * bx


@njit(parallel=True, cache=True)
def _spectral_from_band(packed, line_start, length, full):
    ncomp, nx, ny, nzh = full.shape
    for i in prange(nx):
        for c in range(ncomp):
            for j in range(ny):
                s = line_start[i, j]
                if s < 0:
                    for k in range(nzh):
                        full[c, i, j, k] = 0
                else:
                    for k in range(length):
                        full[c, i, j, k] = packed[c, s + k]
                    for k in range(length, nzh):
                        full[c, i, j, k] = 0


@njit(parallel=True, cache=True)
def _curl_to_band(e, kx, ky, kz, line_start, length, out):
    nx, ny = line_start.shape
    for i in prange(nx):
        for j in range(ny):
            s = line_start[i, j]
            if s < 0:
                continue
            for k in range(length):
                ex, ey, ez = e[0, i, j, k], e[1, i, j, k], e[2, i, j, k]
                tx = ky[j] * ez - kz[k] * ey  # out = i t, exactly as (i k_a) e_b - (i k_b) e_c
                ty = kz[k] * ex - kx[i] * ez
                tz = kx[i] * ey - ky[j] * ex
                out[0, s + k] = complex(-tx.imag, tx.real)
                out[1, s + k] = complex(-ty.imag, ty.real)
                out[2, s + k] = complex(-tz.imag, tz.real)


@njit(parallel=True, cache=True)
def _stage_sums(size, total, k, final, accumulate, first, stage, start, start_factor, scaled, assemble,
                stages, slots, weights):
    ncomp = total.shape[0] if accumulate else stage.shape[0]
    for block in prange((size + BLOCK - 1) // BLOCK):
        lo, hi = block * BLOCK, min(size, (block + 1) * BLOCK)
        for c in range(ncomp):
            if accumulate:
                if first:
                    for p in range(lo, hi):
                        total[c, p] = k[c, p] * final[p]
                else:
                    for p in range(lo, hi):
                        total[c, p] += k[c, p] * final[p]
            if assemble:
                for p in range(lo, hi):
                    v = start[c, p] * start_factor[p] if scaled else start[c, p]
                    for m in range(slots.shape[0]):
                        v += stages[slots[m], c, p] * weights[m, p]
                    stage[c, p] = v


@njit(parallel=True, cache=True)
def _gather(full, line_start, length, out):
    ncomp, nx, ny, _ = full.shape
    for i in prange(nx):
        for c in range(ncomp):
            for j in range(ny):
                s = line_start[i, j]
                if s >= 0:
                    for k in range(length):
                        out[c, s + k] = full[c, i, j, k]


@njit(parallel=True, cache=True)
def _finish_step(y, factor, total, line_start, length):
    ncomp, nx, ny, nzh = y.shape
    for i in prange(nx):
        for c in range(ncomp):
            for j in range(ny):
                s = line_start[i, j]
                for k in range(nzh):
                    v = y[c, i, j, k] * factor[i, j, k]
                    if s >= 0 and k < length:
                        v += total[c, s + k]
                    y[c, i, j, k] = v


class NumbaKernels:
    name = "numba"
    fallback_reason = ""  # as in the numpy set: this set is what was asked for

    def __init__(self, threads: int = 1):
        from kindyn.array_kernels.numpy_kernels import NumpyKernels

        self.threads = max(1, min(int(threads), numba.config.NUMBA_NUM_THREADS))
        self._numpy = NumpyKernels()  # for layouts the line-wise loops do not cover
        self._empty = {}

    def _threads(self) -> None:
        numba.set_num_threads(self.threads)

    def warm_up(self, real_dtype) -> None:
        """Compile (or load from the disk cache) every kernel for ``real_dtype`` and its complex type
        by running it on arrays of a few points, of the same kinds as the solver passes."""
        real = np.dtype(real_dtype)
        complex_ = np.result_type(real, np.complex64)
        line_start = np.array([[0, -1], [2, 4]], dtype=np.int64)  # 3 lines of 2 in a (2, 2, 3) half grid
        support = _Lines(line_start, 2)
        packed = np.ones((3, 6), complex_)
        full = np.empty((3, 2, 2, 3), complex_)
        self.cross_in_place(tuple(np.ones((1, 2, 2), real) for _ in range(3)), np.ones((3, 2, 2, 2), real))
        self.spectral_from_band(support, packed, full)
        self.curl_to_band(support, full, tuple(np.ones(n, real) for n in (2, 2, 3)), packed)
        self.gather(support, full, packed)
        stages = np.ones((1, 3, 6), complex_)
        couplings = self.prepare_couplings([(0, np.ones(6, real))], real, 6)
        self.stage_sums(np.empty_like(packed), packed, np.ones(6, real), True, np.empty_like(packed), packed,
                        np.ones(6, real), stages, couplings)
        self.stage_sums(np.empty_like(packed), packed, np.ones(6, real), False, None, packed, None, stages, None)
        self.finish_step(full, np.ones((2, 2, 3), real), packed, support)
        if not np.all(np.isfinite(full)):
            raise ArithmeticError("numba kernels produced non-finite values on a trial input")

    def cross_in_place(self, u, b: np.ndarray) -> None:
        self._threads()
        shape = b.shape[1:]
        _cross_in_place(*(np.broadcast_to(c, shape) for c in u), b)

    def spectral_from_band(self, support, packed: np.ndarray, full: np.ndarray) -> None:
        if support.line_start is None:
            return self._numpy.spectral_from_band(support, packed, full)
        self._threads()
        _spectral_from_band(packed, support.line_start, support.line_length, full)

    def curl_to_band(self, support, e_hat: np.ndarray, wavenumbers, out: np.ndarray) -> None:
        if support.line_start is None:
            return self._numpy.curl_to_band(support, e_hat, wavenumbers, out)
        self._threads()
        kx, ky, kz = (np.ravel(w) for w in wavenumbers)  # (nx,1,1) etc.: contiguous 1-D views
        _curl_to_band(e_hat, kx, ky, kz, support.line_start, support.line_length, out)

    def gather(self, support, full: np.ndarray, out: np.ndarray) -> np.ndarray:
        if support.line_start is None or full.ndim != 4:
            return support.gather(full, out)
        self._threads()
        _gather(full, support.line_start, support.line_length, out)
        return out

    def prepare_couplings(self, couplings, dtype, size):
        """``[(slot, weight)]`` as the kernel wants them: slot indices and stacked weights."""
        slots = np.array([s for s, _ in couplings], dtype=np.int64)
        weights = np.empty((len(couplings), size), dtype)
        for row, (_, w) in zip(weights, couplings):
            row[...] = w
        return slots, weights

    def _placeholders(self, dtype):
        """Empty arrays standing for the absent operands of :meth:`stage_sums` (made once per dtype)."""
        if dtype not in self._empty:
            real = np.empty(0, dtype).real.dtype
            self._empty[dtype] = (np.empty((0, 0), dtype), np.empty(0, real),
                                  (np.empty(0, np.int64), np.empty((0, 0), real)))
        return self._empty[dtype]

    def stage_sums(self, total, k, final, first: bool, stage, start, start_factor, stages, couplings) -> None:
        self._threads()
        some = k if k is not None else stage
        size = some.shape[-1]
        no_complex, no_real, no_couplings = self._placeholders(some.dtype)
        slots, weights = couplings if stage is not None else no_couplings
        _stage_sums(size,
                    total, no_complex if k is None else k, no_real if final is None else final,
                    k is not None, bool(first),
                    no_complex if stage is None else stage, no_complex if start is None else start,
                    no_real if start_factor is None else start_factor, start_factor is not None, stage is not None,
                    stages, slots, weights)

    def finish_step(self, y: np.ndarray, factor: np.ndarray, total: np.ndarray, support) -> None:
        if support is None or support.line_start is None or y.ndim != 4 or factor.shape != y.shape[1:]:
            return self._numpy.finish_step(y, factor, total, support)
        self._threads()
        _finish_step(y, factor, total, support.line_start, support.line_length)


class _Lines:
    """A minimal band description (line table) for :meth:`NumbaKernels.warm_up`."""

    def __init__(self, line_start, line_length):
        self.line_start, self.line_length = line_start, line_length
