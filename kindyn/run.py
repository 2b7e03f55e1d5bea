"""One kinematic run: from a validated case to a converged growth rate.

Data flow: case -> flow (already built by the case loader) -> solver (engine, induction operator,
stepper) -> samples -> growth estimate -> :class:`RunOutcome`. Output files are written by the
caller (:mod:`kindyn.output`); this module only reads and writes the checkpoint it is handed.

The run is linear, so the field is renormalised to unit energy at every sample and the removed
log-amplitude ``a`` is accumulated: the true energy is ``E exp(2a)`` and never overflows. The uniform
(k = 0) part of ``B`` is zero initially and stays zero (it is a neutral mode of the periodic problem,
excluded from every measurement).
"""

from __future__ import annotations

import math
import time as wallclock
from dataclasses import dataclass, field

import numpy as np
from threadpoolctl import threadpool_limits

from kindyn.assemble import build_solver, check_stability, make_box_layout, transform_settings
from kindyn.diagnostics.growth import GrowthEstimate, estimate_growth
from kindyn.diagnostics.measures import MAGNETIC_ENERGY, run_series
from kindyn.diagnostics.spectra import shell_spectrum
from kindyn.errors import CaseError, NumericalError
from kindyn.initial_fields import flow_field_hat, probe_indices, probe_vector, random_field_hat
from kindyn.timestep import Timing, choose_timing

RUNAWAY_LOG_ENERGY_JUMP = 200.0
CHECKS_PER_ESTIMATE = 4
ESTIMATES_PER_RECORD = 40  # estimate at least every 1/40 of the record so far


@dataclass
class Record:
    """Samples of one run (lists grow as it goes; arrays via :meth:`arrays`)."""

    times: list = field(default_factory=list)
    log_energy: list = field(default_factory=list)
    log_amplitude: list = field(default_factory=list)
    probes: list = field(default_factory=list)
    estimate_times: list = field(default_factory=list)
    estimate_rates: list = field(default_factory=list)
    estimate_errors: list = field(default_factory=list)
    series: dict = field(default_factory=dict)  # name -> samples of each measure of run_series

    def strobed(self, every: int):
        """Samples at whole multiples of ``every`` (whole flow periods), as arrays."""
        idx = slice(0, None, every)
        return (np.asarray(self.times)[idx], np.asarray(self.log_energy)[idx],
                np.asarray(self.probes)[idx], np.asarray(self.log_amplitude)[idx])


@dataclass(frozen=True)
class RunOutcome:
    estimate: GrowthEstimate
    record: Record
    field_hat: np.ndarray  # the final field's coefficients held by this process (all of them when serial)
    field: np.ndarray | None  # the whole final field on the grid, (3, nx, ny, nz), unit energy; None off the first process
    spectrum: tuple[np.ndarray, np.ndarray]
    cutoff_ratio: float
    resolution_warning: bool
    steps: int
    time: float
    timing: Timing
    stop_reason: str
    wall_seconds: float
    resumed: bool
    u_rms: float  # rms speed of the flow at t = 0 on the grid
    array_kernels: str = ""  # the kernel set and threads the solver chose, e.g. "numba, 2 threads"
    array_kernels_note: str = ""  # why "auto" could not use numba here ("" when it could, or was not installed)


def initial_field(case, layout) -> np.ndarray:
    m = case.magnetic
    if m.initial_field == "flow":
        b_hat = flow_field_hat(layout, case.flow)
    else:
        peak = m.initial_peak or case.flow.wavenumber
        b_hat = random_field_hat(layout, m.seed, peak)
    return b_hat.astype(layout.complex_dtype)


def default_tolerance(case) -> float:
    return case.run.tolerance or 1e-4 * case.flow.speed * case.flow.wavenumber


def default_max_time(case) -> float:
    return case.run.max_time or 2000.0 / (case.flow.speed * case.flow.wavenumber)


def run_growth(case, progress=None, checkpoint=None) -> RunOutcome:
    """Integrate until the growth rate converges (or a guard stops the run).

    ``progress(t, estimate, tolerance)`` is called now and then; ``checkpoint`` (optional) has
    ``load(case) -> dict | None`` and ``save(case, state)`` and makes a killed run resumable.
    """
    flow, settings = case.flow, case.run
    layout = make_box_layout(case.box, transform_settings(case.numerics), case.numerics)
    timing = choose_timing(flow, layout, settings.cfl, settings.time_step, settings.sample_interval)
    key, value = ("run.time_step", settings.time_step) if settings.time_step else ("run.cfl", settings.cfl)
    check_stability(settings.scheme, timing.courant, case.path, key, value, timing.courant / timing.dt)
    solver = build_solver(layout, flow, case.eta, layout.transforms, settings.scheme)
    tolerance, max_time = default_tolerance(case), default_max_time(case)
    if settings.min_time > max_time:
        raise CaseError(case.path, "run.min_time", settings.min_time, f"at most run.max_time = {max_time:g}")
    indices = probe_indices(layout)
    measures = run_series(flow.z_independent)
    record, t, step, log_amp = Record(), 0.0, 0, 0.0
    state = checkpoint.load(case) if checkpoint else None
    if state:  # the checkpoint holds the whole field: this process takes its block (any number of processes)
        b_hat = layout.local_part(state["field_hat"]).astype(layout.complex_dtype)
        t, step, log_amp, record = state["time"], state["step"], state["log_amplitude"], Record(**state["record"])
    else:
        b_hat = initial_field(case, layout)
    started, last_save, last_report = wallclock.time(), wallclock.time(), 0.0
    estimate = GrowthEstimate(math.nan, math.inf, math.nan, False, math.nan, (0.0, 0.0), 0, "not started")
    stop_reason = ""
    # samples since the last estimate, from the record itself: a resumed run keeps the schedule
    last = record.estimate_times[-1] if record.estimate_times else -math.inf
    samples_since_estimate = sum(1 for s in record.times[1:] if s > last)
    if not record.times:
        _sample(record, b_hat, layout, t, log_amp, indices, measures)
    while True:
        for _ in range(timing.steps_per_sample):
            if step >= settings.max_steps:
                break
            solver.stepper.step(t, b_hat, timing.dt)
            step += 1
            t = step * timing.dt
        if step >= settings.max_steps and len(record.times) and record.times[-1] != t:
            stop_reason = f"reached max_steps = {settings.max_steps} before converging"
            break
        log_amp = _sample(record, b_hat, layout, t, log_amp, indices, measures, step)
        samples_since_estimate += 1
        due = max(CHECKS_PER_ESTIMATE, len(record.times) // ESTIMATES_PER_RECORD)
        if samples_since_estimate >= due * timing.samples_per_strobe:
            samples_since_estimate = 0
            estimate = layout.from_root(_estimate(record, timing, tolerance, flow))
            record.estimate_times.append(t)
            record.estimate_rates.append(estimate.growth_rate)
            record.estimate_errors.append(estimate.error)
            if estimate.converged and t >= settings.min_time:
                stop_reason = "converged"
                break
        if t >= max_time:
            stop_reason = f"reached max_time = {max_time:g} before converging"
            break
        if step >= settings.max_steps:
            stop_reason = f"reached max_steps = {settings.max_steps} before converging"
            break
        now = wallclock.time()
        if progress and layout.is_root and now - last_report > 2.0:
            progress(t, estimate, tolerance)
            last_report = now
        # the first process's clock decides, so that every process joins the gather of the field
        if checkpoint and layout.from_root(now - last_save > settings.checkpoint_seconds):
            whole = layout.gather_spectral(b_hat)
            if layout.is_root:
                checkpoint.save(case, {"field_hat": whole, "time": t, "step": step,
                                       "log_amplitude": log_amp, "record": record})
            last_save = now
    if record.estimate_times and record.estimate_times[-1] != t:
        estimate = layout.from_root(_estimate(record, timing, tolerance, flow))
    ratio = settled_cutoff_ratio(record)
    field = layout.gather_physical(layout.physical_from_spectral(b_hat))  # the whole field on the first process
    return RunOutcome(estimate, record, b_hat, field, shell_spectrum(b_hat, layout), ratio,
                      ratio > settings.resolution_threshold, step, t, timing, stop_reason,
                      wallclock.time() - started, bool(state),
                      _rms_speed(flow, layout), solver.kernels_used,
                      solver.operator.kernels.fallback_reason)


def _rms_speed(flow, layout) -> float:
    """``u_rms`` of the flow on the grid at t = 0."""
    u = layout.sample_velocity(flow, 0.0)
    return float(np.sqrt(layout.total(np.sum(u ** 2)) / layout.points))


def _estimate(record: Record, timing: Timing, tolerance: float, flow=None) -> GrowthEstimate:
    if getattr(flow, "stochastic", False):  # random time-dependent flow: block-averaged ln E increments
        from kindyn.diagnostics.stochastic_growth import estimate_for_flow
        return estimate_for_flow(record.times, record.log_energy, tolerance, flow)
    # small dense linear algebra: multithreaded BLAS is many times slower here than one thread
    with threadpool_limits(limits=1, user_api="blas"):
        return estimate_growth(*record.strobed(timing.samples_per_strobe), tolerance=tolerance)


def settled_cutoff_ratio(record: Record) -> float:
    """The resolution guard's cut-off ratio averaged over the second half of the record.

    The last sample alone flickers (a growing oscillatory mode moves energy between shells within a
    period), so a run and the same run resumed could disagree; the mean over the second half of the
    samples is a property of the mode, the same for both (the series is checkpointed)."""
    values = np.asarray(record.series.get("cutoff_ratio", []), float)
    if values.size == 0:
        return 0.0
    return float(np.mean(values[values.size // 2:]))


def _sample(record: Record, b_hat, layout, t, log_amp, indices, measures, step=0) -> float:
    """Record one sample, renormalise ``b_hat`` to unit energy, return the new log-amplitude."""
    e = MAGNETIC_ENERGY.evaluate(layout, b_hat)
    previous = record.log_energy[-1] if record.log_energy else None
    if not math.isfinite(e) or e <= 0:
        raise NumericalError(f"magnetic energy became {e} at step {step}, t = {t:.6g} "
                             f"(last finite ln E = {previous}); reduce run.cfl or check the flow")
    log_energy = math.log(e) + 2 * log_amp
    if previous is not None and log_energy - previous > RUNAWAY_LOG_ENERGY_JUMP:
        raise NumericalError(f"runaway growth at step {step}, t = {t:.6g}: ln E jumped from "
                             f"{previous:.4g} to {log_energy:.4g} in one sample; the time step is unstable "
                             "(reduce run.cfl) or the grid is far too coarse")
    record.times.append(t)
    record.log_energy.append(log_energy)
    record.log_amplitude.append(log_amp)
    # probes of the field before renormalisation: the true field is b_hat * exp(log_amp)
    record.probes.append(probe_vector(b_hat, indices, layout))
    scale = 1.0 / math.sqrt(e)
    b_hat *= scale
    for measure in measures:  # intensive quantities: the same for the renormalised field
        record.series.setdefault(measure.name, []).append(measure.evaluate(layout, b_hat))
    return log_amp + 0.5 * math.log(e)
