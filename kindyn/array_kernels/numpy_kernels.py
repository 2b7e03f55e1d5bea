"""The hot-path kernels in plain numpy (one thread), blocked so that operands stay in cache.

Conventions and layouts: :mod:`kindyn.array_kernels`. Each method writes into the arrays it is given;
the scratch it needs is allocated on first use and kept (one instance per solver; each method has
its own scratch).
"""

from __future__ import annotations

import numpy as np

SLAB_BYTES = 1 << 17  # one component of a cross-product slab (128 KiB): the slab's operands stay in cache
CHUNK = 4096          # entries of the packed axis combined at a time in the stage sums


class NumpyKernels:
    name = "numpy"
    threads = 1
    fallback_reason = ""  # set when "auto" wanted numba but numba could not be used

    def __init__(self):
        self._scratch = {}

    def _buffer(self, key, shape, dtype) -> np.ndarray:
        array = self._scratch.get(key)
        if array is None or array.shape != tuple(shape) or array.dtype != dtype:
            array = self._scratch[key] = np.empty(shape, dtype)
        return array

    def cross_in_place(self, u, b: np.ndarray) -> None:
        """``b <- u x b`` on the grid: ``u`` three arrays broadcasting to ``b.shape[1:]``, ``b`` real
        ``(3, nx, ny, nz)``. Slab by slab along x: ``b`` is read once and written once."""
        nx, plane = b.shape[1], b.shape[2] * b.shape[3] * b.itemsize
        width = max(1, min(nx, SLAB_BYTES // plane))
        s0_, s1_, tmp_ = (self._buffer(f"slab{i}", (width, *b.shape[2:]), b.dtype) for i in range(3))
        for start in range(0, nx, width):
            slab = slice(start, min(start + width, nx))
            u0, u1, u2 = (c if c.shape[0] == 1 else c[slab] for c in u)
            b0, b1, b2 = b[0, slab], b[1, slab], b[2, slab]
            s0, s1, tmp = (a[: slab.stop - slab.start] for a in (s0_, s1_, tmp_))
            np.multiply(u1, b2, out=s0)
            np.multiply(u2, b1, out=tmp)
            s0 -= tmp                       # (u x B)_x
            np.multiply(u2, b0, out=s1)
            np.multiply(u0, b2, out=tmp)
            s1 -= tmp                       # (u x B)_y
            np.multiply(u1, b0, out=tmp)
            np.multiply(u0, b1, out=b2)
            b2 -= tmp                       # (u x B)_z, written over B_z (no longer needed)
            np.copyto(b0, s0)
            np.copyto(b1, s1)

    def spectral_from_band(self, support, packed: np.ndarray, full: np.ndarray) -> None:
        """``full <- packed`` inside the band, 0 outside (``full`` ``(3, nx, ny, nzh)``)."""
        full.fill(0)  # the whole buffer: a contiguous fill is faster than the strided complement
        for view, values in zip(support.full_views(full), support.packed_views(packed)):
            np.copyto(view, values)

    def curl_to_band(self, support, e_hat: np.ndarray, wavenumbers, out: np.ndarray) -> None:
        """``out <- i k x e_hat`` on the support, packed (``e_hat`` ``(3, *trailing)``; ``wavenumbers``:
        real ``k_x, k_y, k_z`` broadcastable to the trailing shape, or plain numbers, with any factor
        such as ``1/N`` folded in)."""
        tmp_ = self._buffer("curl", (max(support.sizes, default=1),), out.dtype)
        for block, o in zip(support.blocks, support.packed_views(out)):
            e = e_hat[(slice(None), *block)]
            ikx, iky, ikz = (1j * _on_block(k, block) for k in wavenumbers)
            tmp = tmp_[: o[0].size].reshape(o.shape[1:])
            for i, (ka, a, kb, c) in enumerate(((iky, 2, ikz, 1), (ikz, 0, ikx, 2), (ikx, 1, iky, 0))):
                np.multiply(e[a], ka, out=o[i])
                np.multiply(e[c], kb, out=tmp)
                o[i] -= tmp

    def prepare_couplings(self, couplings, dtype, size):
        """``[(slot, weight)]`` as :meth:`stage_sums` wants them (here: unchanged)."""
        return [(s, np.broadcast_to(np.asarray(w, dtype), (size,))) for s, w in couplings]

    def stage_sums(self, total, k, final, first: bool, stage, start, start_factor, stages, couplings) -> None:
        """The Runge–Kutta sums on packed arrays ``(ncomp, size)``:

        * if ``k`` is given: ``total = k * final`` (``first``) or ``total += k * final``;
        * if ``stage`` is given: ``stage = start * start_factor + sum_j stages[s_j] * w_j`` for
          ``(s_j, w_j)`` in ``couplings`` (``start_factor`` None: no factor).

        ``final``, ``start_factor`` and the ``w_j`` are real arrays ``(size,)`` (broadcast over the
        components). Chunk by chunk along the packed axis, so that products stay in cache.
        """
        size = (k if k is not None else stage).shape[-1]
        ncomp = (k if k is not None else stage).shape[0]
        tmp_ = self._buffer("chunk", (ncomp, min(CHUNK, size)), (k if k is not None else stage).dtype)
        for a in range(0, size, CHUNK):
            chunk = (Ellipsis, slice(a, min(a + CHUNK, size)))
            part = chunk[1]
            tmp = tmp_[:, : part.stop - part.start]
            if k is not None:
                if first:
                    np.multiply(k[chunk], final[part], out=total[chunk])
                else:
                    np.multiply(k[chunk], final[part], out=tmp)
                    total[chunk] += tmp
            if stage is not None:
                y = stage[chunk]
                if start_factor is None:
                    np.copyto(y, start[chunk])
                else:
                    np.multiply(start[chunk], start_factor[part], out=y)
                for slot, weight in couplings:
                    np.multiply(stages[slot][chunk], weight[part], out=tmp)
                    y += tmp

    def gather(self, support, full: np.ndarray, out: np.ndarray) -> np.ndarray:
        """``out <- full`` on the support, packed (``full`` ``(ncomp, *trailing)``)."""
        return support.gather(full, out)

    def finish_step(self, y: np.ndarray, factor: np.ndarray, total: np.ndarray, support) -> None:
        """``y <- factor * y`` everywhere, then ``y += total`` on the support (``total`` packed, or
        shaped like ``y`` when ``support`` is None)."""
        y *= factor
        if support is None:
            y += total.reshape(y.shape)
        else:
            support.add_to(total, y)


def _on_block(k, block):
    """A broadcastable array (or a number) restricted to a block: slice only its axes of full length."""
    if np.ndim(k) == 0:
        return k
    return k[tuple(s if n > 1 else slice(None) for s, n in zip(block, np.shape(k)))]
