"""Time integration of the test problems: samples, blocks, resets, standard errors, stopping.

The full and SOCA test problems of each average are stepped together from ``b = 0`` with the
integrating-factor Runge–Kutta stepper. Time is cut into **blocks** (a whole number of flow
periods for a periodic flow, so averages are over whole periods). In each block the mean EMF is
either

* ``"mean"``: the time average over the block (rectangle rule on ``samples_per_block`` equally
  spaced samples ``t_0 + j dt_s``, spectrally accurate for periodic signals), or
* ``"end"``: the value at the block end (a steady flow without resets: the test solutions approach
  the steady solution, and the coefficients converge to its values).

Coefficients are linear in the EMF, so the coefficients of a block mean are the means of the
coefficients. Blocks that start less than ``settle_time`` after the start or a reset are
**invalid** (the test solutions are still building up) and left out.

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

from kindyn.diagnostics.batch_means import batch_means_error
from kindyn.errors import NumericalError
from kindyn.testfield.problems import TestProblems
from kindyn.timestep import cfl_time_step, flow_time_period

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

    @property
    def reset_interval(self) -> float | None:
        return None if self.reset_blocks is None else self.reset_blocks * self.block_length


def time_settings(flow, layout, eta: float, plan, cfl: float, time_step: float | None) -> TimeSettings:
    """Choose the step and the blocks (see module docstring and ``[testfield]`` keys)."""
    period = flow_time_period(flow)
    turnover = 1.0 / (flow.speed * flow.wavenumber)
    dt = time_step if time_step else cfl_time_step(flow, layout, cfl)
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
    reset_blocks = None if plan.reset_interval is None else max(1, math.ceil(plan.reset_interval / block - 1e-9))
    settle = plan.settle_time
    if settle is None:
        settle = SETTLE_DIFFUSION_TIMES / (eta * flow.wavenumber ** 2)
        if reset_blocks is not None:
            settle = min(settle, 0.5 * reset_blocks * block)
    max_time = plan.max_time or settle + DEFAULT_BLOCKS * block
    mode = "end" if (flow.steady and reset_blocks is None) else "mean"
    return TimeSettings(dt, steps_per_sample, samples, block, reset_blocks, float(settle), plan.min_time,
                        float(max_time), mode)


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


def integrate(groups, settings: TimeSettings, scales: dict, tolerance: float, progress=None) -> TimeOutcome:
    """Step all ``groups`` until the coefficients converge or a guard stops (see module docstring).

    ``scales`` maps ``"alpha"``/``"eta"`` to the unit of the tolerance (``U`` and ``U/k_f``).
    ``progress(t, worst)`` is called now and then with the worst error/tolerance ratio.
    """
    s = settings
    record, t, step, cycle, last_reset = TimeRecord(), 0.0, 0, 0, 0.0
    growing, growth_rate, converged, stop_reason = False, math.nan, False, ""
    started, last_report = wallclock.time(), wallclock.time()
    min_valid = 2 if s.mode == "end" else MIN_MEAN_BLOCKS
    cycle_min_log_energy = math.inf
    estimates, errors = {}, {}
    while True:
        block_start = t
        sums = None
        for _ in range(s.samples_per_block):
            if s.mode == "mean":
                sample = [g.emf(t) for g in groups]
                sums = sample if sums is None else [(a[0] + b[0], a[1] + b[1]) for a, b in zip(sums, sample)]
            for _ in range(s.steps_per_sample):
                for g in groups:
                    g.step(t, s.dt)
                step += 1
                t = step * s.dt
        if s.mode == "end":
            means = [g.emf(t) for g in groups]
        else:
            means = [(a / s.samples_per_block, b / s.samples_per_block) for a, b in sums]
        values = {}
        for g, (full, soca) in zip(groups, means):
            values.update(g.coefficients(full, soca))
        for name, value in values.items():
            record.values.setdefault(name, []).append(value)
        energy = sum(g.energy() for g in groups)
        if not math.isfinite(energy):
            raise NumericalError(f"test-field solutions became {energy} at step {step}, t = {t:.6g}; "
                                 "reduce run.cfl or set testfield.reset_interval")
        log_energy = math.log(energy) if energy > 0 else -math.inf
        record.end_times.append(t)
        record.valid.append(block_start - last_reset >= s.settle_time - 1e-9 * max(1.0, s.settle_time))
        record.cycle.append(cycle)
        record.log_energy.append(log_energy)
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
                       wallclock.time() - started)
