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

Right-hand sides that are constant in time between breaks (a renovating flow is redrawn at
multiples of its renewal time ``tau`` and constant in between) are declared with
``constant_between = tau``: steps must then lie inside one interval ``[n tau, (n+1) tau]``, and
every stage of a step is evaluated at the step's midpoint, so that the last stage of a step that
ends on a break still sees that step's interval (a stage time equal to the break would belong to
the next one). For such a right-hand side this is exact, and ``N`` stays a pure function of
``(t, y)``.

The sums themselves (``total += w K``, ``Y = E y_n + sum w_j K_j``, ``y <- E(h) y + total``) are
formed by an array-kernel set handed in by the caller (:mod:`kindyn.array_kernels`: one fused pass
per stage with numba, blocked numpy otherwise).
"""

from __future__ import annotations

import numpy as np

from kindyn.stepping.tableaux import Tableau


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
        self.line_start, self.line_length = self._line_table()

    def _line_table(self):
        """For three trailing axes whose blocks are all sets of whole lines along the last axis,
        starting at index 0 and of one length ``L``: ``(line_start, L)`` with ``line_start[i, j]``
        the packed offset of line ``(i, j)`` (``-1``: not in the support). ``(None, 0)`` otherwise.
        Line-wise array kernels use it to visit the support in one pass."""
        lengths = {shape[-1] for shape in self.shapes}
        if not self.blocks or len(lengths) != 1 or len(self.trailing_shape) != 3:
            return None, 0
        line_start = np.full(self.trailing_shape[:-1], -1, dtype=np.int64)
        for block, shape, offset in zip(self.blocks, self.shapes, self.offsets):
            ranges = [s.indices(n) for s, n in zip(block, self.trailing_shape)]
            if ranges[-1][0] != 0 or any(step != 1 for _, _, step in ranges):
                return None, 0
            lines = offset + shape[-1] * np.arange(int(np.prod(shape[:-1]))).reshape(shape[:-1])
            line_start[tuple(slice(a, b) for a, b, _ in ranges[:-1])] = lines
        return line_start, lengths.pop()

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
    """Advance ``y`` (complex array of ``shape``, modified in place) by one step of size ``h``.

    The stage sums run on work arrays ``(shape[0], size)``: the packed band values, or ``y`` itself
    seen as two-dimensional (then ``y`` must be C-contiguous). ``kernels`` forms them: an object with
    ``prepare_couplings``, ``stage_sums``, ``gather`` and ``finish_step`` (the array-kernel sets of
    :mod:`kindyn.array_kernels`).
    """

    def __init__(self, rhs, decay_rates: np.ndarray, tableau: Tableau, shape, dtype, kernels,
                 constant_between: float | None = None):
        self.rhs, self.rates, self.tableau, self.kernels = rhs, np.asarray(decay_rates), tableau, kernels
        if constant_between is not None and not constant_between > 0:
            raise ValueError(f"constant_between must be a positive interval, got {constant_between}")
        self.constant_between = constant_between
        self.shape = tuple(shape)
        self.support = getattr(rhs, "support", None) if hasattr(rhs, "packed") else None
        if self.support is None:
            size = int(np.prod(self.shape[1:]))
            self._rates_work = np.ascontiguousarray(np.broadcast_to(self.rates, self.shape[1:])).reshape(size)
        else:
            size = self.support.size
            self._rates_work = self.support.gather(self.rates, np.empty(size, self.rates.dtype))
        work_shape = (self.shape[0], size)
        self._slot_of, slots = _stage_slots(tableau)
        self._stages = np.empty((slots, *work_shape), dtype)  # K_i in slot _slot_of[i]
        self._stage_value = np.empty(work_shape, dtype)
        self._sum = np.empty(work_shape, dtype)
        self._packed_y = None if self.support is None else np.empty(work_shape, dtype)
        self._first_final = next((i for i, bi in enumerate(tableau.b) if bi != 0.0), None)
        # stage i needs assembling unless Y_i = y_n (c_i = 0 and no a_ij)
        self._assembles = [ci != 0.0 or any(a != 0.0 for a in row) for ci, row in zip(tableau.c, tableau.a)]
        self._h = None

    def _weights(self, h: float):
        """Per step size: stage factors ``E(c_i h)``, couplings ``h a_ij E((c_i - c_j) h)``, weights
        ``h b_i E((1 - c_i) h)`` (real arrays over the work axis) and ``E(h)`` on the full array."""
        if h != self._h:
            tab, rates = self.tableau, self._rates_work

            def factor(s: float, weight: float = 1.0):
                return (weight * np.exp(-rates.astype(np.float64) * (s * h))).astype(rates.dtype)

            self._stage_factor = [None if ci == 0.0 else factor(ci) for ci in tab.c]
            self._couplings = [self.kernels.prepare_couplings(
                [(self._slot_of[j], factor(ci - tab.c[j], h * aij)) for j, aij in enumerate(tab.a[i]) if aij != 0.0],
                rates.dtype, rates.size) for i, ci in enumerate(tab.c)]
            self._final = [None if bi == 0.0 else factor(1.0 - ci, h * bi) for ci, bi in zip(tab.c, tab.b)]
            self._decay = np.exp(-self.rates.astype(np.float64) * h).astype(self.rates.dtype)
            self._h = h

    def _stage_times(self, t: float, h: float) -> list[float]:
        """``t + c_i h``; for a right-hand side constant between breaks, the step's midpoint for every
        stage (after checking that the step lies inside one interval)."""
        tau = self.constant_between
        if tau is None:
            return [t + ci * h for ci in self.tableau.c]
        start, end = t / tau, (t + h) / tau
        slack = 1e-9 * max(1.0, abs(end))
        if np.floor(start + slack) < np.ceil(end - slack) - 1:
            raise ValueError(f"the step [{t:.17g}, {t + h:.17g}] crosses a break of a right-hand side that is "
                             f"constant between multiples of {tau:.17g}: align the steps with the breaks")
        return [t + 0.5 * h] * self.tableau.stages

    def step(self, t: float, y: np.ndarray, h: float) -> None:
        tab = self.tableau
        self._weights(h)
        times = self._stage_times(t, h)
        if self.support is not None:
            work, evaluate = self.kernels.gather(self.support, y, self._packed_y), self.rhs.packed
        else:
            if not y.flags.c_contiguous:
                raise ValueError("the unpacked stepper needs a C-contiguous state array")
            shape, rhs = self.shape, self.rhs
            work = y.reshape(shape[0], -1)

            def evaluate(s, value, out):
                rhs(s, value.reshape(shape), out.reshape(shape))
        stage = self._combine(None, 0, work)
        for i in range(tab.stages):
            evaluate(times[i], stage, self._stages[self._slot_of[i]])
            stage = self._combine(i, i + 1 if i + 1 < tab.stages else None, work)
        if self._first_final is None:  # no stage contributes: pure decay
            y *= self._decay
        else:  # y = E(h) y + sum everywhere (exact outside the support, where the sum vanishes)
            self.kernels.finish_step(y, self._decay, self._sum, self.support)

    def _combine(self, done: int | None, following: int | None, work: np.ndarray):
        """After ``K_done``: ``sum += h b_done E((1 - c_done) h) K_done``; then assemble the stage
        value ``Y_following`` and return it (``work`` itself for a first stage ``Y = y_n``). One
        kernel call does both, in one pass over the arrays."""
        final = None if done is None else self._final[done]
        assemble = following is not None and self._assembles[following]
        if final is None and not assemble:
            return work if following is not None else None
        k = None if final is None else self._stages[self._slot_of[done]]
        self.kernels.stage_sums(self._sum, k, final, done == self._first_final,
                                self._stage_value if assemble else None, work,
                                self._stage_factor[following] if assemble else None, self._stages,
                                self._couplings[following] if assemble else None)
        return self._stage_value if assemble else work


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
