"""Time integration of the test problems: samples, blocks, resets, standard errors, stopping.

The full and SOCA test problems of each average are stepped together from ``b = 0`` with the
integrating-factor Runge–Kutta stepper. Time is cut into **blocks** (a whole number of flow
periods for a periodic flow, so averages are over whole periods). In each block the mean EMF is
either

* ``"mean"``: the time average over the block (rectangle rule on ``samples_per_block`` equally
  spaced samples ``t_0 + j dt_s``, spectrally accurate for periodic signals; for renovating flows
  the piecewise quadrature below), or
* ``"end"``: the value at the block end (a steady flow without resets: the test solutions approach
  the steady solution, and the coefficients converge to its values).

**Renovating flows** (constant between renewals at multiples of ``tau``; blocks are whole renewal
intervals) make the EMF jump at every renewal: the new flow meets a field built by the old one.
A left-endpoint rectangle rule on such a sawtooth is biased by ``-(E(tau-) - E(0+))/(2n)`` (``n``
samples per interval): about -3 % at ``n = 32`` and -12 % at ``n = 8``. Each renewal interval is
therefore integrated on its own, with the one-sided limits at its ends: ``E(0+)`` (the sample at
the renewal, with the new flow: renovating flows are right-continuous) and ``E(tau-)`` (the field at
the end of the interval with the flow of that interval, evaluated at the midpoint of its last
step), by composite Simpson on the ``n + 1`` values (Simpson and one 3/8 panel for odd ``n >= 3``,
the trapezoid for ``n = 1``): exact for polynomials of degree 3 on each interval, error
``O((tau/n)^4)`` for a piecewise-smooth EMF.

Coefficients are linear in the EMF, so the coefficients of a block mean are the means of the
coefficients. Blocks that start less than ``settle_time`` after the start or a reset are
**invalid** (the test solutions are still building up) and left out. Default settle time:
``5/(eta k_f^2)``; with resets at most half the reset interval (a reset interval of one block is
refused: every block would start at a reset); for a renovating flow with resets (the resets fall
on renewals) zero: the
field left from earlier intervals is uncorrelated with the flow of a new one, so its contribution
to the mean EMF averages to zero and a test solution restarted from zero at a renewal has the
same mean EMF as one that was not (no settling is needed, and with ``reset_interval = tau`` every
interval is a complete, independent sample).

**Resets**: every ``reset_blocks`` blocks all test solutions are set back to zero, so that a
growing eigenmode of the homogeneous problem (above dynamo onset) cannot swamp them. Above onset
the results then depend on the reset interval; the energy of the full test solutions is watched,
and a solution whose energy doubles through the trend of a cycle's valid blocks (a least-squares
fit of ``ln E``) is reported as growing.

**Standard errors** ("mean" mode) come from block averages: the valid block values are grouped
into batches of 1, 2, 4, ... blocks (at least four batches) and the largest of the standard errors
``std(batch means)/sqrt(batches)`` is taken (it grows with the batch size while blocks are
correlated). In "end" mode the error is the change over the last block.

**Stopping**: when every error is below its tolerance (``tolerance * U`` for alpha,
``tolerance * U/k_f`` for eta) with at least four valid blocks ("mean") or two ("end") and
``t >= min_time``; or at ``max_time`` (not converged); or when, without resets, the test
solutions grew by ``exp(RUNAWAY_LOG_ENERGY)`` within the run (not converged).
"""

from __future__ import annotations

import math
import time as wallclock
from dataclasses import dataclass, field

import numpy as np

from kindyn.assemble import check_stability
from kindyn.diagnostics.batch_means import batch_means_error
from kindyn.diagnostics.resolution import counted_axes
from kindyn.diagnostics.spectra import cutoff_ratio
from kindyn.errors import NumericalError, ParameterError
from kindyn.stepping import TABLEAUX
from kindyn.testfield.problems import TestProblems
from kindyn.timestep import advection_rate, diffusion_number, flow_time_period, max_speed

MIN_MEAN_BLOCKS = 4
RUNAWAY_LOG_ENERGY = 20.0  # energy grown by e^20 (5e8) within one cycle
TURNOVERS_PER_BLOCK = 10.0
SETTLE_DIFFUSION_TIMES = 5.0
DEFAULT_BLOCKS = 200


@dataclass(frozen=True)
class TimeSettings:
    """Step, sampling, blocks, resets and guards of one test-field integration."""

    dt: float
    steps_per_sample: int
    samples_per_block: int
    block_length: float
    reset_blocks: int | None
    settle_time: float
    min_time: float
    max_time: float
    mode: str
    samples_per_renewal: int | None = None  # renovating flows: samples per renewal interval (piecewise quadrature)

    @property
    def reset_interval(self) -> float | None:
        return None if self.reset_blocks is None else self.reset_blocks * self.block_length


def time_settings(flow, layout, eta: float, plan, cfl: float, time_step: float | None, scheme: str = "rk4",
                  file: str = "") -> TimeSettings:
    """Choose the step and the blocks (see module docstring and ``[testfield]`` keys); refuse a step
    beyond the scheme's stability limit (``scheme``, ``file`` name them in the message)."""
    period = flow_time_period(flow)
    turnover = 1.0 / (flow.speed * flow.wavenumber)
    rate = advection_rate(flow, layout)
    dt = time_step if time_step else (cfl / rate if rate > 0 else math.inf)
    if not math.isfinite(dt):
        dt = 0.1 * turnover
    if period:
        periods = max(1, round((plan.block_length or period) / period))
        block = periods * period
        samples = plan.samples_per_period * periods
    else:
        block = plan.block_length or TURNOVERS_PER_BLOCK * turnover
        samples = plan.samples_per_period
    steps_per_sample = max(1, math.ceil(block / samples / dt))
    dt = block / (samples * steps_per_sample)
    key, value = ("run.time_step", time_step) if time_step else ("run.cfl", cfl)
    check_stability(scheme, dt * rate, file, key, value, rate,
                    damping=diffusion_number(eta, dt, max_speed(flow, layout, period)))
    reset_blocks = None if plan.reset_interval is None else max(1, math.ceil(plan.reset_interval / block - 1e-9))
    renovating = bool(getattr(flow, "renewal_time", None))
    settle = plan.settle_time
    if settle is None:
        settle = SETTLE_DIFFUSION_TIMES / (eta * flow.wavenumber ** 2)
        if reset_blocks is not None:
            settle = 0.0 if renovating else min(settle, 0.5 * reset_blocks * block)
    if reset_blocks is not None and settle > (reset_blocks - 1) * block + 1e-9 * block:
        interval = reset_blocks * block
        if plan.settle_time is None:
            raise ParameterError("testfield.reset_interval", plan.reset_interval,
                                 f"at least two averaging blocks ({2 * block:.6g}): the test solutions restart from "
                                 f"zero at every reset and need a block to settle (or give testfield.settle_time = 0 "
                                 "to average from the reset on)")
        raise ParameterError("testfield.settle_time", plan.settle_time,
                             f"less than the reset interval minus one block ({interval - block:.6g}): otherwise no "
                             "averaging block is valid")
    max_time = plan.max_time or settle + DEFAULT_BLOCKS * block
    mode = "end" if (flow.steady and reset_blocks is None) else "mean"
    per_renewal = None
    if renovating and mode == "mean":
        per_renewal = samples // max(1, round(block / flow.renewal_time))
    return TimeSettings(dt, steps_per_sample, samples, block, reset_blocks, float(settle), plan.min_time,
                        float(max_time), mode, per_renewal)


def interval_weights(n: int) -> np.ndarray:
    """Quadrature weights (summing to 1) on ``n + 1`` equally spaced values of one interval, ends
    included: composite Simpson for even ``n``; Simpson then one 3/8 panel for odd ``n >= 3``; the
    trapezoid for ``n = 1``. Exact for cubic polynomials when ``n >= 2``."""
    if n < 1:
        raise ValueError("an interval needs at least one panel")
    w = np.zeros(n + 1)
    if n == 1:
        w[:] = 0.5
        return w
    simpson = n if n % 2 == 0 else n - 3
    for i in range(0, simpson, 2):
        w[i:i + 3] += np.array([1.0, 4.0, 1.0]) / 3.0
    if simpson < n:
        w[simpson:simpson + 4] += np.array([3.0, 9.0, 9.0, 3.0]) / 8.0
    return w / n


class ProblemGroup:
    """Full and SOCA test problems of one average, stepped together.

    ``coefficients(emf_full, emf_soca) -> dict`` turns block-mean EMFs into named coefficient
    arrays (names starting with ``alpha`` or ``eta``; SOCA ones end in ``_soca``).
    """

    def __init__(self, layout, flow, eta, fields, axis, scheme: str, coefficients, kernels=None):
        self.layout, self.coefficients = layout, coefficients
        self.operators, self.steppers, self.states = [], [], []
        for soca in (False, True):
            problems = TestProblems(layout, flow, eta, fields, axis, soca=soca, scheme=scheme, kernels=kernels)
            self.operators.append(problems)
            self.steppers.append(problems.stepper)
            self.states.append(np.zeros(problems.shape, dtype=layout.complex_dtype))

    def step(self, t: float, dt: float) -> None:
        for stepper, state in zip(self.steppers, self.states):
            stepper.step(t, state, dt)

    def emf(self, t: float) -> tuple[np.ndarray, np.ndarray]:
        return tuple(op.emf(t, state) for op, state in zip(self.operators, self.states))

    def reset(self) -> None:
        for state in self.states:
            state.fill(0)

    def energy(self) -> float:
        """``<|b|^2>/2`` summed over the full test problems."""
        return self.layout.energy(self.states[0])


def block_standard_error(values: np.ndarray) -> np.ndarray:
    """Standard error of the mean of ``values`` (shape ``(N, ...)``) from batch means (see module doc;
    :func:`kindyn.diagnostics.batch_means.batch_means_error`): single samples first, then batches of
    2, 4, ... while at least four remain."""
    values = np.asarray(values, float)
    if values.shape[0] < 2:
        return np.full(values.shape[1:], np.inf)
    return batch_means_error(values, 1, MIN_MEAN_BLOCKS, first_min_batches=2)[0]


@dataclass
class TimeRecord:
    """One entry per block: end time, validity, cycle, ln E of the full solutions, coefficient values."""

    end_times: list = field(default_factory=list)
    valid: list = field(default_factory=list)
    cycle: list = field(default_factory=list)
    log_energy: list = field(default_factory=list)
    values: dict = field(default_factory=dict)
    cutoff_ratio: list = field(default_factory=list)  # largest cut-off ratio of the full test solutions

    def arrays(self, name: str) -> np.ndarray:
        return np.asarray(self.values[name])


@dataclass(frozen=True)
class TimeOutcome:
    estimates: dict
    errors: dict
    converged: bool
    stop_reason: str
    time: float
    steps: int
    growing: bool
    growth_rate: float
    record: TimeRecord
    settings: TimeSettings
    wall_seconds: float
    cutoff_ratio: float = math.nan  # settled cut-off ratio of the full test solutions (settled_cutoff_ratio)


def _estimate(record: TimeRecord, mode: str):
    valid = np.asarray(record.valid, bool)
    names = list(record.values)
    if mode == "end":
        idx = np.flatnonzero(valid)
        if idx.size < 2:
            return None, None, idx.size
        est = {k: record.arrays(k)[idx[-1]] for k in names}
        err = {k: np.abs(record.arrays(k)[idx[-1]] - record.arrays(k)[idx[-2]]) for k in names}
        return est, err, idx.size
    count = int(valid.sum())
    if count < 1:
        return None, None, 0
    est = {k: record.arrays(k)[valid].mean(axis=0) for k in names}
    err = {k: block_standard_error(record.arrays(k)[valid]) for k in names}
    return est, err, count


def _cycle_growth(record: TimeRecord) -> float:
    """Amplitude growth rate from ``ln E`` over the valid blocks of the current cycle (nan if < 3)."""
    cycle = record.cycle[-1]
    pick = [i for i, (c, v) in enumerate(zip(record.cycle, record.valid)) if c == cycle and v]
    if len(pick) < 3:
        return math.nan
    t = np.asarray(record.end_times)[pick]
    y = np.asarray(record.log_energy)[pick]
    slope = np.polyfit(t - t.mean(), y, 1)[0]
    return 0.5 * float(slope)


def solutions_cutoff_ratio(layout, states: np.ndarray, axes=(0, 1, 2)) -> float:
    """The largest :func:`~kindyn.diagnostics.spectra.cutoff_ratio` over the stacked test solutions
    ``(3 n, ...)`` (``0`` for solutions that are still zero)."""
    states = np.asarray(states)
    return max((cutoff_ratio(states[3 * i:3 * i + 3], layout, axes) for i in range(states.shape[0] // 3)),
               default=0.0)


def settled_cutoff_ratio(record: TimeRecord) -> float:
    """Mean cut-off ratio over the second half of the valid blocks (as a run decides its flag:
    a property of the solutions, not of the last sample)."""
    values = [r for r, v in zip(record.cutoff_ratio, record.valid) if v]
    if not values:
        values = list(record.cutoff_ratio)
    if not values:
        return math.nan
    return float(np.mean(values[len(values) // 2:]))


def integrate(groups, settings: TimeSettings, scales: dict, tolerance: float, progress=None,
              axes=None) -> TimeOutcome:
    """Step all ``groups`` until the coefficients converge or a guard stops (see module docstring).

    ``scales`` maps ``"alpha"``/``"eta"`` to the unit of the tolerance (``U`` and ``U/k_f``).
    ``progress(t, worst)`` is called now and then with the worst error/tolerance ratio; ``axes``:
    the axes whose cut-off counts for the resolution check of the test solutions (default: all but
    those along which the flow is uniform).
    """
    s = settings
    if axes is None:
        axes = counted_axes(groups[0].operators[0].flow, groups[0].layout)
    record, t, step, cycle, last_reset = TimeRecord(), 0.0, 0, 0, 0.0
    growing, growth_rate, converged, stop_reason = False, math.nan, False, ""
    started, last_report = wallclock.time(), wallclock.time()
    min_valid = 2 if s.mode == "end" else MIN_MEAN_BLOCKS
    cycle_min_log_energy = math.inf
    estimates, errors = {}, {}
    n = s.samples_per_renewal
    weights = interval_weights(n) if n else None
    intervals = s.samples_per_block // n if n else 1

    def accumulate(sums, sample, w):
        scaled = [(w * a, w * b) for a, b in sample]
        return scaled if sums is None else [(a[0] + b[0], a[1] + b[1]) for a, b in zip(sums, scaled)]

    while True:
        block_start = t
        sums = None
        for j in range(s.samples_per_block):
            if s.mode == "mean":
                # the sample at a renewal is the right limit E(0+): the flow is right-continuous
                w = 1.0 / s.samples_per_block if weights is None else weights[j % n] / intervals
                sums = accumulate(sums, [g.emf(t) for g in groups], w)
            for _ in range(s.steps_per_sample):
                for g in groups:
                    g.step(t, s.dt)
                step += 1
                t = step * s.dt
            if weights is not None and (j + 1) % n == 0:  # end of a renewal interval: the left limit E(tau-)
                sums = accumulate(sums, [g.emf(t - 0.5 * s.dt) for g in groups], weights[n] / intervals)
        if s.mode == "end":
            means = [g.emf(t) for g in groups]
        else:
            means = sums
        values = {}
        for g, (full, soca) in zip(groups, means):
            values.update(g.coefficients(full, soca))
        for name, value in values.items():
            record.values.setdefault(name, []).append(value)
        energy = sum(g.energy() for g in groups)
        if not math.isfinite(energy):
            raise NumericalError(_non_finite_message(groups, record, s, step, t, energy))
        log_energy = math.log(energy) if energy > 0 else -math.inf
        record.end_times.append(t)
        record.valid.append(block_start - last_reset >= s.settle_time - 1e-9 * max(1.0, s.settle_time))
        record.cycle.append(cycle)
        record.log_energy.append(log_energy)
        record.cutoff_ratio.append(max(solutions_cutoff_ratio(g.layout, g.states[0], axes) for g in groups))
        if record.valid[-1]:
            cycle_min_log_energy = min(cycle_min_log_energy, log_energy)
        rate = _cycle_growth(record)
        if math.isfinite(rate):
            growth_rate = rate
            pick = [i for i, (c, v) in enumerate(zip(record.cycle, record.valid)) if c == cycle and v]
            span = record.end_times[pick[-1]] - record.end_times[pick[0]]
            if rate > 0 and 2 * rate * span > math.log(2.0):
                growing = True
        estimates, errors, count = _estimate(record, s.mode)
        worst = math.inf
        if estimates is not None and count >= min_valid:
            worst = max(float(np.max(errors[k])) / (tolerance * scales[k.split("_")[0]]) for k in errors)
            if worst <= 1.0 and t >= s.min_time - 1e-12:
                converged, stop_reason = True, "converged"
                break
        if t >= s.max_time - 1e-9 * s.dt:
            stop_reason = f"reached testfield.max_time = {s.max_time:g} before converging"
            break
        if s.reset_blocks is None and log_energy - cycle_min_log_energy > RUNAWAY_LOG_ENERGY:
            growing = True
            stop_reason = ("a growing mode of the homogeneous problem swamps the test solutions (dynamo above "
                           "onset); set testfield.reset_interval")
            break
        if s.reset_blocks is not None and len(record.end_times) % s.reset_blocks == 0:
            for g in groups:
                g.reset()
            cycle += 1
            last_reset = t
            cycle_min_log_energy = math.inf
        now = wallclock.time()
        if progress and now - last_report > 2.0:
            progress(t, worst)
            last_report = now
    if estimates is None:
        estimates = {k: np.full_like(np.asarray(v[-1], float), np.nan) for k, v in record.values.items()}
        errors = {k: np.full_like(v, np.inf) for k, v in estimates.items()}
    return TimeOutcome(estimates, errors, converged, stop_reason, t, step, growing, growth_rate, record, s,
                       wallclock.time() - started, settled_cutoff_ratio(record))


def _non_finite_message(groups, record: TimeRecord, s: TimeSettings, step: int, t: float, energy: float) -> str:
    """What became non-finite and where it came from: the flow, a growing mode, or the state."""
    layout, flow = groups[0].layout, groups[0].operators[0].flow
    renovating = bool(getattr(flow, "renewal_time", None))
    start = step - s.samples_per_block * s.steps_per_sample
    for n in range(max(0, start), step):
        for c in ((0.5,) if renovating else (0.0, 0.5, 1.0)):
            time = (n + c) * s.dt
            u = layout.sample_velocity(flow, time)
            bad = int(layout.total(np.count_nonzero(~np.isfinite(u))))
            if bad:
                return (f"the flow's velocity is not finite at t = {time:.6g} ({bad} values): the test-field "
                        f"solutions became {energy} at step {step}, t = {t:.6g}, because the flow did; check the "
                        "flow's definition near that time")
    finite = [e for e in record.log_energy if math.isfinite(e)]
    if len(finite) >= 2 and finite[-1] - finite[0] > RUNAWAY_LOG_ENERGY:
        return (f"the test-field solutions grew without bound (ln E from {finite[0]:.4g} to {finite[-1]:.4g}) and became "
                f"{energy} at step {step}, t = {t:.6g}: a growing mode of the homogeneous problem (dynamo above "
                "onset); set testfield.reset_interval")
    return (f"the test-field solutions became {energy} at step {step}, t = {t:.6g} while the flow stayed finite and "
            "the step is within the stability limit: the state is corrupt (an overflow or a fault); this is a bug "
            "to report, with the case file")
