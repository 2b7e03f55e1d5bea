"""Integrating-factor (Lawson) Runge–Kutta stepping of ``dy/dt = N(t, y) - r * y``.

``r`` is a real array of decay rates (diagonal linear part, integrated exactly; it broadcasts
against ``y``) and ``N`` any right-hand side ``N(t, y, out)`` that only reads ``y`` (the first stage
hands it ``y_n`` itself). With ``E(s) = exp(-r s)`` one step of
a tableau ``(a, b, c)`` is

    Y_i     = E(c_i h) y_n + h sum_{j<i} a_ij E((c_i - c_j) h) K_j,     K_i = N(t_n + c_i h, Y_i)
    y_{n+1} = E(h) y_n + h sum_i b_i E((1 - c_i) h) K_i

so stage times are ``t_n + c_i h`` (correct for time-dependent ``N``) and ``N = 0`` is integrated
exactly. The weights ``h a_ij E((c_i - c_j) h)`` and ``h b_i E((1 - c_i) h)`` are tabulated once per
step size, the sum over ``b_i`` is accumulated as the stages come, and a stage derivative ``K_j`` is
kept only until the last stage that needs it (one buffer for the classical RK4).

Packed stepping. When ``N`` is non-zero only on a known set of entries (a pseudo-spectral operator
whose output is confined to the dealiased band: about 30% of the half grid), the right-hand side
may offer

* ``rhs.support``: a :class:`BlockSupport` (disjoint rectangular blocks of the trailing axes), and
* ``rhs.packed(t, y_packed, out_packed)``: ``N`` on packed arrays of shape ``(shape[0], support.size)``
  (the values inside the support, block after block), reading only those values of ``y``.

The stages are then computed on the packed values only. Outside the support ``N`` vanishes, so
there ``y`` is advanced exactly by ``E(h) y``: the result is the same as the unpacked scheme, with
about a third of the memory traffic and memory. This module knows nothing about magnetism.
"""

from __future__ import annotations

import numpy as np

from kindyn.stepping.tableaux import Tableau

CHUNK = 4096  # entries of the last axis combined at a time on packed arrays (operands stay in cache)


class BlockSupport:
    """Entries inside disjoint rectangular blocks of the trailing axes of arrays ``(..., *trailing)``.

    ``blocks`` is a sequence of index tuples of slices (one slice per trailing axis, unit step);
    empty blocks are dropped. Packed arrays have shape ``(..., size)`` and hold the blocks one after
    the other, each in C order.
    """

    def __init__(self, blocks, trailing_shape):
        self.trailing_shape = tuple(trailing_shape)
        kept, shapes = [], []
        for block in blocks:
            block = tuple(block)
            if len(block) != len(self.trailing_shape):
                raise ValueError(f"block {block} does not index {len(self.trailing_shape)} trailing axes")
            extent = tuple(len(range(*s.indices(n))) for s, n in zip(block, self.trailing_shape))
            if all(e > 0 for e in extent):
                kept.append(block)
                shapes.append(extent)
        self.blocks, self.shapes = tuple(kept), tuple(shapes)
        self.sizes = tuple(int(np.prod(s)) for s in shapes)
        self.offsets = tuple(int(o) for o in np.cumsum((0,) + self.sizes[:-1]))
        self.size = int(sum(self.sizes))

    def full_views(self, full: np.ndarray) -> list[np.ndarray]:
        """Views of ``full`` (``(..., *trailing)``) on each block."""
        lead = (slice(None),) * (full.ndim - len(self.trailing_shape))
        return [full[lead + block] for block in self.blocks]

    def packed_views(self, packed: np.ndarray) -> list[np.ndarray]:
        """Views of ``packed`` (``(..., size)``, contiguous last axis) shaped like each block."""
        lead = packed.shape[:-1]
        return [packed[..., o:o + n].reshape(*lead, *s) for o, n, s in zip(self.offsets, self.sizes, self.shapes)]

    def gather(self, full: np.ndarray, out: np.ndarray) -> np.ndarray:
        """``out = full`` on the support, packed."""
        for p, f in zip(self.packed_views(out), self.full_views(full)):
            np.copyto(p, f)
        return out

    def add_to(self, packed: np.ndarray, full: np.ndarray) -> np.ndarray:
        """``full += packed`` on the support (``full`` unchanged elsewhere)."""
        for f, p in zip(self.full_views(full), self.packed_views(packed)):
            f += p
        return full


class IntegratingFactorStepper:
    """Advance ``y`` (complex array of ``shape``, modified in place) by one step of size ``h``."""

    def __init__(self, rhs, decay_rates: np.ndarray, tableau: Tableau, shape, dtype):
        self.rhs, self.rates, self.tableau = rhs, np.asarray(decay_rates), tableau
        self.support = getattr(rhs, "support", None) if hasattr(rhs, "packed") else None
        work_shape = tuple(shape) if self.support is None else (shape[0], self.support.size)
        self._rates_work = self.rates if self.support is None else self.support.gather(
            self.rates, np.empty(self.support.size, self.rates.dtype))
        self._slot_of, slots = _stage_slots(tableau)
        self._stages = [np.empty(work_shape, dtype) for _ in range(slots)]
        self._stage_value = np.empty(work_shape, dtype)
        self._sum = np.empty(work_shape, dtype)
        self._packed_y = None if self.support is None else np.empty(work_shape, dtype)
        if self.support is None:  # whole arrays at once (factors broadcast against them)
            self._chunks = [((), np.empty(work_shape, dtype))]
        else:  # packed arrays (ncomp, size): slices of the last axis, one small scratch
            scratch = np.empty((work_shape[0], min(CHUNK, work_shape[1])), dtype)
            self._chunks = [((Ellipsis, slice(a, min(a + CHUNK, work_shape[1]))),
                             scratch[:, : min(CHUNK, work_shape[1] - a)]) for a in range(0, work_shape[1], CHUNK)]
        self._first_final = next((i for i, bi in enumerate(tableau.b) if bi != 0.0), None)
        self._h = None

    def _weights(self, h: float):
        """Per step size: stage factors ``E(c_i h)``, couplings ``h a_ij E((c_i - c_j) h)``, weights
        ``h b_i E((1 - c_i) h)`` (on the work arrays; a plain float where the exponential is 1) and
        ``E(h)`` on the full array."""
        if h != self._h:
            tab, rates = self.tableau, self._rates_work

            def factor(s: float, weight: float = 1.0):
                if s == 0.0:
                    return weight
                return (weight * np.exp(-rates.astype(np.float64) * (s * h))).astype(rates.dtype)

            self._stage_factor = [None if ci == 0.0 else factor(ci) for ci in tab.c]
            self._couplings = [[(j, factor(ci - tab.c[j], h * aij)) for j, aij in enumerate(tab.a[i]) if aij != 0.0]
                               for i, ci in enumerate(tab.c)]
            self._final = [None if bi == 0.0 else factor(1.0 - ci, h * bi) for ci, bi in zip(tab.c, tab.b)]
            self._decay = np.exp(-self.rates.astype(np.float64) * h).astype(self.rates.dtype)
            self._h = h

    def step(self, t: float, y: np.ndarray, h: float) -> None:
        tab = self.tableau
        self._weights(h)
        packed = self.support is not None
        work = self.support.gather(y, self._packed_y) if packed else y
        evaluate = self.rhs.packed if packed else self.rhs
        stage = self._combine(None, 0, work)
        for i in range(tab.stages):
            k = self._stages[self._slot_of[i]]
            evaluate(t + tab.c[i] * h, stage, k)
            stage = self._combine(i, i + 1 if i + 1 < tab.stages else None, work)
        y *= self._decay  # everywhere: exact outside the support
        if self._first_final is not None:
            if packed:
                self.support.add_to(self._sum, y)
            else:
                y += self._sum

    def _combine(self, done: int | None, following: int | None, work: np.ndarray):
        """After ``K_done``: ``sum += h b_done E((1 - c_done) h) K_done``; then assemble the stage
        value ``Y_following`` and return it (``work`` itself for a first stage ``Y = y_n``).

        Chunk by chunk along the last axis of the work arrays, so that the products stay in cache
        between the multiply and the add (one pass over memory per operand instead of three).
        """
        final = None if done is None else self._final[done]
        assemble = following is not None and (self._stage_factor[following] is not None
                                               or self._couplings[following])
        if final is None and not assemble:
            return work if following is not None else None
        k = None if done is None else self._stages[self._slot_of[done]]
        total, Y = self._sum, self._stage_value
        first = done == self._first_final
        e = None if not assemble else self._stage_factor[following]
        couplings = [] if not assemble else [(self._stages[self._slot_of[j]], w) for j, w in self._couplings[following]]

        for chunk, tmp in self._chunks:
            if final is not None:
                if first:
                    np.multiply(k[chunk], _part(final, chunk), out=total[chunk])
                else:
                    np.multiply(k[chunk], _part(final, chunk), out=tmp)
                    total[chunk] += tmp
            if assemble:
                y_chunk = Y[chunk]
                if e is None:
                    np.copyto(y_chunk, work[chunk])
                else:
                    np.multiply(work[chunk], e[chunk], out=y_chunk)
                for kj, weight in couplings:
                    np.multiply(kj[chunk], _part(weight, chunk), out=tmp)
                    y_chunk += tmp
        return Y if assemble else work


def _part(factor, chunk):
    """A factor on a chunk: plain numbers apply everywhere."""
    return factor if np.ndim(factor) == 0 else factor[chunk]


def _stage_slots(tableau: Tableau) -> tuple[list[int], int]:
    """Buffer slot of each stage derivative ``K_i``: ``K_i`` may overwrite a ``K_j`` that no stage after
    the i-th reads (stage i reads it while assembling ``Y_i``, before ``K_i`` is evaluated; the final
    sum is accumulated as the stages come). Returns ``(slot_of, slot_count)``: one slot for RK4."""
    last_use = [i for i in range(tableau.stages)]
    for i, row in enumerate(tableau.a):
        for j, aij in enumerate(row):
            if aij != 0.0:
                last_use[j] = max(last_use[j], i)
    slot_of, busy_until = [], []  # busy_until[s]: last stage that reads the K held in slot s
    for i in range(tableau.stages):
        free = [s for s, until in enumerate(busy_until) if until <= i]  # read while assembling Y_i, then free
        if free:
            slot = free[0]
            busy_until[slot] = last_use[i]
        else:
            slot = len(busy_until)
            busy_until.append(last_use[i])
        slot_of.append(slot)
    return slot_of, len(busy_until)
