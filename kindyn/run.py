"""One kinematic run: from a validated case to a converged growth rate, with the errors it carries.

Data flow: case -> flow (already built by the case loader) -> solver (engine, induction operator,
stepper) -> samples -> growth estimate -> checks (time step, resolution) -> :class:`RunOutcome`.
Output files are written by the caller (:mod:`kindyn.output`); this module only reads and writes
the checkpoint it is handed.

The run is linear, so the field is renormalised to unit energy at every sample and the removed
log-amplitude ``a`` is accumulated: the true energy is ``E exp(2a)`` and never overflows. The uniform
(k = 0) part of ``B`` is zero initially and stays zero (it is a neutral mode of the periodic problem,
excluded from every measurement).

What the reported error covers (``RunOutcome.estimate``; its ``covers`` says which parts are in):

* ``fit``: the growth estimator's bound (:mod:`kindyn.diagnostics.growth`; the stop rule).
* ``time step``: a Richardson estimate of the time-discretisation error. When the estimator first
  meets the tolerance, the run is continued from its field over :data:`PROBE_STROBES` strobe
  intervals twice (copies), with ``dt`` and with ``dt/2``, and the growth rate of each continuation
  is measured (snapshot fit of the probes; ``ln E`` for random flows). For a scheme of order ``p``,
  ``gamma(dt) - gamma(0) = (gamma(dt) - gamma(dt/2)) 2^p/(2^p - 1)`` to leading order; that is the
  time-step error. Both continuations start from the same field, so what is left of its transients
  largely cancels in the difference (measured: within 3 % of the actual error for the periodic
  Galloway–Proctor flow with rk2, rk3 and rk4; for the oscillating ABC mode up to ~100x above it
  when it is tiny, i.e. safe). The stop rule counts it: the run goes on until the estimator's error
  plus the time-step error is within the tolerance, and stops at once when the time-step error
  alone exceeds it (a smaller step is needed, not a longer run). The bound ``error`` counts it
  three times (the safety factor of a two-grid Richardson estimate, Roache 1994, J. Fluids Eng.
  116, 405, "grid convergence index"; from memory): the leading-order estimate was 3 % below the
  actual error for rk2 on the Galloway–Proctor flow. ``uncertainty`` counts it once.
* ``grid dependence`` (flagged runs only): a run is *flagged* when either resolution criterion
  trips — the spectrum at the cut-off (:func:`kindyn.diagnostics.spectra.cutoff_ratio`, averaged
  over the second half of the record, so that a run and the same run resumed decide alike) or the
  diffusive scale (:mod:`kindyn.diagnostics.resolution`). A flagged run then repeats itself on a
  coarser *shadow* grid (every kept mode number reduced to ``min(m - 1, round(0.8 m))``, for at most
  twice the run's simulated time), and ``|gamma - gamma_shadow| + error_shadow`` enters the error.
  That bounds the error when it falls with resolution, and over-states it by about the ratio of
  the two grids' errors (spectral convergence: often 10-100x). Where no shadow can be run (a flow
  the coarser grid cannot hold, a shadow without an estimate) the error is unknown (``inf``).

``error`` is the sum of the parts (a safe bound, with the time-step part times
:data:`RICHARDSON_SAFETY`); ``uncertainty`` combines the calibrated parts in quadrature (the
estimator's ``|gamma_energy - gamma_snapshot|``, the time-step and the grid terms).
``converged`` means the estimator met the tolerance *and* the whole error is below it;
``RunOutcome.trustworthy`` adds that no resolution criterion tripped.
"""

from __future__ import annotations

import dataclasses
import math
import time as wallclock
from dataclasses import dataclass, field

import numpy as np
from threadpoolctl import threadpool_limits

from kindyn.assemble import build_solver, check_stability, make_box_layout, transform_settings
from kindyn.box import Box, max_kept_mode
from kindyn.diagnostics.growth import GrowthEstimate, estimate_growth, snapshot_eigenvalue
from kindyn.diagnostics.measures import MAGNETIC_ENERGY, run_series
from kindyn.diagnostics.resolution import counted_axes, diffusive_resolution, resolution_flags
from kindyn.diagnostics.spectra import shell_spectrum
from kindyn.errors import CaseError, KindynError, NumericalError
from kindyn.initial_fields import flow_field_hat, probe_indices, probe_vector, random_field_hat
from kindyn.stepping import TABLEAUX
from kindyn.timestep import Timing, choose_timing

RUNAWAY_LOG_ENERGY_JUMP = 200.0
CHECKS_PER_ESTIMATE = 4
ESTIMATES_PER_RECORD = 40  # estimate at least every 1/40 of the record so far
PROBE_STROBES = 8  # strobe intervals of each time-step probe (at least one turnover time)
SHADOW_FRACTION = 0.8  # the shadow grid keeps min(m - 1, round(0.8 m)) modes per axis
SHADOW_TIME = 2.0  # the shadow run may take up to this multiple of the run's simulated time
RICHARDSON_SAFETY = 3.0  # the bound counts 3x the Richardson estimate of two step sizes (Roache 1994)


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
    estimate: GrowthEstimate  # the final estimate: its error covers estimate.covers (module docstring)
    record: Record
    field_hat: np.ndarray  # the final field's coefficients held by this process (all of them when serial)
    field: np.ndarray | None  # the whole final field on the grid, (3, nx, ny, nz), unit energy; None off the first process
    spectrum: tuple[np.ndarray, np.ndarray]
    cutoff_ratio: float
    resolution_warning: bool  # either resolution criterion tripped (resolution_flags says which)
    steps: int
    time: float
    timing: Timing
    stop_reason: str
    wall_seconds: float
    resumed: bool
    u_rms: float  # rms speed of the flow at t = 0 on the grid
    array_kernels: str = ""  # the kernel set and threads the solver chose, e.g. "numba, 2 threads"
    array_kernels_note: str = ""  # why "auto" could not use numba here ("" when it could, or was not installed)
    resolution_flags: tuple = ()  # "spectrum" and/or "diffusive_scale"
    diffusive_scale: float = math.nan  # sqrt(eta/|grad u|_rms)
    diffusive_resolution: float = math.nan  # k_cut * diffusive_scale (resolved when >= 1)
    resolution_caution: str = ""  # the sentences for the flagged criteria ("" when none tripped)
    shadow_grid: tuple | None = None  # the grid of the grid-dependence check (flagged runs)
    shadow_growth_rate: float = math.nan
    estimator: GrowthEstimate | None = None  # the growth estimator's own result (before the run's checks)
    checkpoint_notes: tuple = ()  # one line each: a checkpoint discarded, or not written (the run went on)

    @property
    def trustworthy(self) -> bool:
        """Converged (whole error below the tolerance) and no resolution criterion tripped."""
        return bool(self.estimate.converged and not self.resolution_warning)


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


@dataclass
class _State:
    """Where an integration is: field, time, step, accumulated log-amplitude, record."""

    b_hat: np.ndarray
    t: float = 0.0
    step: int = 0
    log_amp: float = 0.0
    record: Record = field(default_factory=Record)
    time_error: float | None = None  # the time-step error once measured (checkpointed: a resume keeps it)


def check_sampling(case, timing, max_time: float) -> None:
    """Refuse a sampling the run cannot keep (one-line case errors naming the key that set it): a
    sample interval beyond ``max_time`` (the run stops only at samples, so it would overshoot), or
    a step so small that ``run.max_steps`` steps cover less than one turnover time ``1/(U k_f)`` or
    do not reach the first sample (nothing meaningful would be measured)."""
    settings, flow = case.run, case.flow
    if timing.sample_interval > max_time * (1 + 1e-12):
        key, value = (("run.sample_interval", settings.sample_interval) if settings.sample_interval
                      else ("run.max_time", max_time))
        raise CaseError(case.path, key, value, f"a sample interval ({timing.sample_interval:.6g}) not above "
                        f"run.max_time = {max_time:g}: the run stops only at samples")
    tau = getattr(flow, "tau", None)
    if settings.time_step:
        key, value = "run.time_step", settings.time_step
    elif tau and not flow.steady:
        key, value = "flow.tau", tau
    else:
        key, value = "run.cfl", settings.cfl
    turnover = 1.0 / (flow.speed * flow.wavenumber)
    if settings.max_steps * timing.dt < turnover:
        raise CaseError(case.path, key, value, f"steps that cover one turnover time 1/(U k_f) = {turnover:.3g} "
                        f"within run.max_steps = {settings.max_steps} (dt = {timing.dt:.3g} covers "
                        f"{settings.max_steps * timing.dt:.3g})")
    if timing.steps_per_sample > settings.max_steps:
        if settings.sample_interval and not settings.time_step:
            key, value = "run.sample_interval", settings.sample_interval
        raise CaseError(case.path, key, value, f"at most run.max_steps = {settings.max_steps} steps to the first "
                        f"sample (this needs {timing.steps_per_sample}, dt = {timing.dt:.3g}): nothing would be "
                        "measured")


def run_growth(case, progress=None, checkpoint=None) -> RunOutcome:
    """Integrate until the growth rate converges (or a guard stops the run), then check it.

    ``progress(t, estimate, tolerance)`` is called now and then; ``checkpoint`` (optional) has
    ``load(case) -> dict | None`` and ``save(case, state)`` and makes a killed run resumable
    (:class:`kindyn.output.checkpoint.Checkpoint`, whose ``load`` verifies what it returns and
    discards what cannot be used: the run then starts afresh). A finished run saves its final state
    as a *finished* checkpoint before returning; a run that loads one rebuilds its outcome from it
    without stepping (a kill after the result was written but before the checkpoint was removed costs
    nothing). What the checkpoint said (discarded, not written) is in ``RunOutcome.checkpoint_notes``.
    """
    flow, settings = case.flow, case.run
    layout = make_box_layout(case.box, transform_settings(case.numerics), case.numerics)
    timing = choose_timing(flow, layout, settings.cfl, settings.time_step, settings.sample_interval, case.eta)
    key, value = ("run.time_step", settings.time_step) if settings.time_step else ("run.cfl", settings.cfl)
    check_stability(settings.scheme, timing.courant, case.path, key, value, timing.courant / timing.dt,
                    damping=timing.damping)
    solver = build_solver(layout, flow, case.eta, layout.transforms, settings.scheme)
    tolerance, max_time = default_tolerance(case), default_max_time(case)
    if settings.min_time > max_time:
        raise CaseError(case.path, "run.min_time", settings.min_time, f"at most run.max_time = {max_time:g}")
    check_sampling(case, timing, max_time)
    saved = checkpoint.load(case) if checkpoint else None  # verified: a usable state or None
    if saved:  # the checkpoint holds the whole field: this process takes its block (any number of processes)
        state = _State(layout.local_part(saved["field_hat"]).astype(layout.complex_dtype), saved["time"],
                       saved["step"], saved["log_amplitude"], Record(**saved["record"]), saved.get("time_error"))
    else:
        state = _State(initial_field(case, layout))
        _check_initial_field(state.b_hat, layout, case)
    finished = (saved or {}).get("finished")
    started = wallclock.time()
    axes = counted_axes(flow, layout)
    if finished:  # the run had finished: its outcome from the saved state, without stepping
        estimate = (layout.from_root(_estimate(state.record, timing, tolerance, flow)) if state.record.estimate_times
                    else _NOT_STARTED)
        stop_reason, time_error = str(finished["stop_reason"]), float(finished["time_error"])
    else:
        estimate, stop_reason, time_error = _integrate(case, layout, solver, timing, tolerance, max_time, state,
                                                       axes, progress=progress, checkpoint=checkpoint,
                                                       probe_time_step=True)
    integrated_stop_reason = stop_reason
    estimator = estimate
    ratio = settled_cutoff_ratio(state.record)
    diffusive = diffusive_resolution(flow, layout, case.eta, axes)
    flags, resolution_text = resolution_flags(ratio, settings.resolution_threshold, diffusive)
    shadow_grid, shadow_rate, grid_error = None, math.nan, math.nan
    if finished:
        shadow_grid = tuple(finished["shadow_grid"]) if finished["shadow_grid"] else None
        shadow_rate, grid_error = float(finished["shadow_growth_rate"]), float(finished["grid_error"])
    if math.isfinite(estimate.growth_rate):
        if math.isnan(time_error):
            time_error = time_step_error(solver, layout, state, timing, flow, TABLEAUX[settings.scheme].order)
        if flags and not finished:
            shadow_grid, shadow = _shadow_run(case, layout, timing, tolerance, state.t, axes, estimate.growth_rate)
            if shadow is not None and math.isfinite(shadow.growth_rate) and math.isfinite(shadow.error):
                shadow_rate = shadow.growth_rate
                grid_error = abs(estimate.growth_rate - shadow.growth_rate) + shadow.error
            else:
                grid_error = math.inf
        estimate, stop_reason = _final_estimate(estimate, time_error, grid_error, bool(flags), tolerance,
                                                stop_reason, shadow_grid, _time_step_advice(layout))
    if checkpoint and not finished:  # finished: before the caller writes the result (module Checkpoint docs)
        whole = layout.gather_spectral(state.b_hat)
        if layout.is_root:
            checkpoint.save(case, {"field_hat": whole, "time": state.t, "step": state.step,
                                   "log_amplitude": state.log_amp, "record": state.record, "time_error": time_error,
                                   "finished": {"stop_reason": integrated_stop_reason, "time_error": time_error,
                                                "shadow_grid": list(shadow_grid) if shadow_grid else None,
                                                "shadow_growth_rate": shadow_rate, "grid_error": grid_error}})
    notes = tuple(checkpoint.notes) if checkpoint else ()
    field_whole = layout.gather_physical(layout.physical_from_spectral(state.b_hat))  # on the first process
    return RunOutcome(estimate, state.record, state.b_hat, field_whole, shell_spectrum(state.b_hat, layout), ratio,
                      bool(flags), state.step, state.t, timing, stop_reason, wallclock.time() - started, bool(saved),
                      _rms_speed(flow, layout), solver.kernels_used, solver.operator.kernels.fallback_reason,
                      tuple(flags), diffusive.scale, diffusive.ratio, resolution_text, shadow_grid, shadow_rate,
                      estimator, notes)


def _integrate(case, layout, solver, timing: Timing, tolerance: float, max_time: float, state: _State,
               axes=(0, 1, 2), progress=None, checkpoint=None, probe_time_step: bool = False,
               shadow_of: float | None = None, shadow_min_time: float = 0.0) -> tuple[GrowthEstimate, str, float]:
    """Step ``state`` (in place) until the estimate converges or a limit stops it: the estimate, why
    it stopped, and the time-step error (``nan`` unless measured).

    With ``probe_time_step`` the stop rule counts the time-step error too: when the estimator first
    meets the tolerance, :func:`time_step_error` is measured once, and the run stops when the
    estimator's error plus it is within the tolerance (or at once when the time-step error alone
    exceeds the tolerance: running longer cannot help, a smaller step can). A shadow run
    (``shadow_of``: the run's growth rate) stops as soon as its error is below the tolerance or half
    its difference from that rate (the difference is then known to a factor 1.5)."""
    flow, settings = case.flow, case.run
    indices = probe_indices(layout)
    measures = run_series(axes)
    record = state.record
    last_save, last_report = wallclock.time(), 0.0
    estimate = _NOT_STARTED
    stop_reason = ""
    order = TABLEAUX[settings.scheme].order
    # samples since the last estimate, from the record itself: a resumed run keeps the schedule
    last = record.estimate_times[-1] if record.estimate_times else -math.inf
    samples_since_estimate = sum(1 for s in record.times[1:] if s > last)
    diagnose = _Diagnosis(case, layout, timing)
    if not record.times:
        _sample(record, state.b_hat, layout, state.t, state.log_amp, indices, measures, 0, diagnose)
    while True:
        start_step = state.step
        for _ in range(timing.steps_per_sample):
            if state.step >= settings.max_steps:
                break
            solver.stepper.step(state.t, state.b_hat, timing.dt)
            state.step += 1
            state.t = state.step * timing.dt
        if state.step >= settings.max_steps and len(record.times) and record.times[-1] != state.t:
            stop_reason = f"reached max_steps = {settings.max_steps} before converging"
            break
        diagnose.last_steps = (start_step, state.step)
        state.log_amp = _sample(record, state.b_hat, layout, state.t, state.log_amp, indices, measures,
                                state.step, diagnose)
        samples_since_estimate += 1
        due = max(CHECKS_PER_ESTIMATE, len(record.times) // ESTIMATES_PER_RECORD)
        if samples_since_estimate >= due * timing.samples_per_strobe:
            samples_since_estimate = 0
            estimate = layout.from_root(_estimate(record, timing, tolerance, flow))
            if shadow_of is not None and math.isfinite(estimate.growth_rate) and state.t >= shadow_min_time:
                wide = 0.5 * abs(estimate.growth_rate - shadow_of)
                if wide > tolerance and not estimate.converged:
                    estimate = layout.from_root(_estimate(record, timing, wide, flow))
            record.estimate_times.append(state.t)
            record.estimate_rates.append(estimate.growth_rate)
            record.estimate_errors.append(estimate.error)
            if estimate.converged and state.t >= settings.min_time:
                if not probe_time_step:
                    stop_reason = "converged"
                    break
                if state.time_error is None:
                    state.time_error = time_step_error(solver, layout, state, timing, flow, order)
                time_error = state.time_error
                if estimate.error + RICHARDSON_SAFETY * time_error <= tolerance:
                    stop_reason = "converged"
                    break
                if RICHARDSON_SAFETY * time_error >= tolerance:
                    stop_reason = (f"the time-step error estimate {time_error:.3g} (x{RICHARDSON_SAFETY:g} in the error "
                                   f"bound) exceeds the tolerance {tolerance:.3g}: running longer cannot reduce it "
                                   f"({_time_step_advice(layout)})")
                    break
        if state.t >= max_time:
            stop_reason = f"reached max_time = {max_time:g} before converging"
            break
        if state.step >= settings.max_steps:
            stop_reason = f"reached max_steps = {settings.max_steps} before converging"
            break
        now = wallclock.time()
        if progress and layout.is_root and now - last_report > 2.0:
            progress(state.t, estimate, tolerance)
            last_report = now
        # the first process's clock decides, so that every process joins the gather of the field
        if checkpoint and layout.from_root(now - last_save > settings.checkpoint_seconds):
            whole = layout.gather_spectral(state.b_hat)
            if layout.is_root:
                checkpoint.save(case, {"field_hat": whole, "time": state.t, "step": state.step,
                                       "log_amplitude": state.log_amp, "record": record,
                                       "time_error": state.time_error})
            last_save = now
    if record.estimate_times and record.estimate_times[-1] != state.t:
        estimate = layout.from_root(_estimate(record, timing, tolerance, flow))
    return estimate, stop_reason, (math.nan if state.time_error is None else state.time_error)


_NOT_STARTED = GrowthEstimate(math.nan, math.inf, math.nan, False, math.nan, (0.0, 0.0), 0, "not started")


def _time_step_advice(layout) -> str:
    if np.dtype(layout.real_dtype) == np.float32:
        return ("in single precision the step-halving probe is dominated by round-off: use double precision "
                "(numerics.precision) or a larger tolerance")
    return "reduce run.cfl or run.time_step"


def _final_estimate(estimate: GrowthEstimate, time_error: float, grid_error: float, flagged: bool,
                    tolerance: float, stop_reason: str, shadow_grid, advice: str = "reduce run.cfl") \
        -> tuple[GrowthEstimate, str]:
    """The estimator's result with the time-step and (flagged runs) grid parts added (module docstring)."""
    parts, covers = [estimate.error], ["fit"]
    squares = [estimate.uncertainty if math.isfinite(estimate.uncertainty) else estimate.error]
    if math.isfinite(time_error):
        parts.append(RICHARDSON_SAFETY * time_error)
        squares.append(time_error)
        covers.append("time step")
    this_grid = float(sum(parts))
    if flagged:
        parts.append(grid_error)
        squares.append(grid_error)
        covers.append("grid dependence" if math.isfinite(grid_error) else "grid dependence (unknown)")
    error = float(sum(parts))
    uncertainty = float(math.sqrt(sum(x * x for x in squares))) if all(map(math.isfinite, squares)) else math.inf
    converged = bool(estimate.converged and error <= tolerance * (1 + 1e-12))
    note = estimate.note
    if estimate.converged and not converged:
        why = []
        if math.isfinite(time_error) and RICHARDSON_SAFETY * time_error > tolerance / 2:
            why.append(f"the time-step error estimate {time_error:.2g} (x{RICHARDSON_SAFETY:g} in the bound; "
                       f"{advice})")
        if flagged:
            where = f" against the shadow grid {list(shadow_grid)}" if shadow_grid else ""
            why.append(f"the grid dependence {grid_error:.2g}{where} (repeat on a finer grid)" if math.isfinite(grid_error)
                       else "an unknown grid dependence (no shadow-grid estimate; repeat on a finer grid)")
        reason = " and ".join(why) or f"the added time-step error {time_error:.2g} (x{RICHARDSON_SAFETY:g})"
        note = f"the growth estimate met the tolerance {tolerance:.3g}, but its error {error:.3g} includes {reason}"
        stop_reason = note
    final = dataclasses.replace(estimate, error=error, converged=converged, note=note, uncertainty=uncertainty,
                                time_step_error=time_error, grid_error=grid_error if flagged else math.nan,
                                covers=", ".join(covers), error_this_grid=this_grid)
    return final, stop_reason


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


# --- the time-step error -------------------------------------------------------------------------

def time_step_error(solver, layout, state: _State, timing: Timing, flow, order: int) -> float:
    """Richardson estimate of the time-discretisation error of the growth rate (module docstring).

    The final field is continued over ``PROBE_STROBES`` strobe intervals (at least one turnover time)
    with ``dt`` and with ``dt/2`` (copies; ``state`` is not touched)."""
    strobe_steps = timing.steps_per_sample * timing.samples_per_strobe
    turnover = 1.0 / (flow.speed * flow.wavenumber)
    strobes = max(PROBE_STROBES, math.ceil(turnover / (strobe_steps * timing.dt) - 1e-9))
    indices = probe_indices(layout)
    stochastic = bool(getattr(flow, "stochastic", False))
    rates = []
    for refine in (1, 2):
        b_hat = state.b_hat.copy()
        h = timing.dt / refine
        times, probes, amplitudes, log_energy = [state.t], [probe_vector(b_hat, indices, layout)], [0.0], [0.0]
        log_amp, step = 0.0, 0
        for j in range(1, strobes + 1):
            for _ in range(strobe_steps * refine):
                solver.stepper.step(state.t + step * h, b_hat, h)
                step += 1
            e = layout.energy(b_hat)
            if not (math.isfinite(e) and e > 0):
                return math.inf
            times.append(state.t + step * h)
            probes.append(probe_vector(b_hat, indices, layout))
            amplitudes.append(log_amp)
            log_energy.append(math.log(e) + 2 * log_amp)
            b_hat *= 1.0 / math.sqrt(e)
            log_amp += 0.5 * math.log(e)
        rate = math.nan
        if not stochastic and layout.is_root:
            with threadpool_limits(limits=1, user_api="blas"):
                p = snapshot_eigenvalue(np.asarray(times), np.asarray(probes), np.asarray(amplitudes),
                                        max_rank=4)
            rate = p.real
        rate = layout.from_root(rate)
        if not math.isfinite(rate):  # random flows (and a failed snapshot fit): the mean ln E slope
            rate = 0.5 * (log_energy[-1] - log_energy[0]) / (times[-1] - times[0])
        rates.append(rate)
    factor = 2.0 ** order / (2.0 ** order - 1.0)
    return float(abs(rates[0] - rates[1]) * factor)


# --- the grid-dependence (shadow) run ------------------------------------------------------------

def shadow_grid(grid, axes) -> tuple[int, ...] | None:
    """The coarser grid of the grid-dependence check: on every counted axis the kept mode number
    ``m`` becomes ``m' = min(m - 1, round(0.8 m))`` (``None`` when some ``m' < 1``), on the
    smallest even grid that keeps it (``3 m' < n'``)."""
    out = list(grid)
    for i in axes:
        m = max_kept_mode(grid[i])
        reduced = min(m - 1, int(round(SHADOW_FRACTION * m)))
        if reduced < 1:
            return None
        n = 3 * reduced + 1
        out[i] = n if n % 2 == 0 else n + 1
    return tuple(out)


def _shadow_flow(case, box):
    """The case's flow on the shadow ``box``: the same object if it accepts the box, else built again
    from the case's flow section (user flows check themselves on the grid they are built for)."""
    try:
        case.flow.check_box(box)
        return case.flow
    except KindynError:
        pass
    from kindyn.case.load import build_flow

    return build_flow(case.flow_type, dict(case.flow_params), box, case.path)


def _shadow_run(case, layout, timing: Timing, tolerance: float, duration: float, axes, growth_rate: float):
    """The same run (same step, tolerance and initial-field recipe) on the shadow grid, for at least
    ``duration`` (the run's time) unless it converges to the tolerance, and at most
    ``SHADOW_TIME * duration``: ``(grid, estimate)``, or ``(grid or None, None)`` when it cannot be run."""
    grid = shadow_grid(case.box.grid, axes)
    if grid is None:
        return None, None
    box = Box(case.box.lengths, grid)
    try:
        flow = _shadow_flow(case, box)
        shadow_case = dataclasses.replace(case, box=box, flow=flow) if flow is not case.flow else case
        shadow_layout = make_box_layout(box, layout.transforms, case.numerics)
        shadow_timing = choose_timing(flow, shadow_layout, case.run.cfl, timing.dt, case.run.sample_interval,
                                      case.eta)
        solver = build_solver(shadow_layout, flow, case.eta, shadow_layout.transforms, case.run.scheme)
        state = _State(initial_field(shadow_case, shadow_layout))
        estimate, _, _ = _integrate(shadow_case, shadow_layout, solver, shadow_timing, tolerance,
                                    max(SHADOW_TIME * duration, shadow_timing.sample_interval), state, axes,
                                    shadow_of=growth_rate, shadow_min_time=duration)
    except (KindynError, ValueError, TypeError):
        return grid, None
    return grid, estimate


# --- guards against non-finite values ------------------------------------------------------------

def _check_initial_field(b_hat, layout, case) -> None:
    bad = int(layout.total(np.count_nonzero(~np.isfinite(b_hat))))
    if bad:
        source = "the flow (magnetic.initial_field = \"flow\")" if case.magnetic.initial_field == "flow" \
            else "the random initial field"
        raise NumericalError(f"the initial magnetic field has {bad} non-finite coefficients, made from {source}; "
                             "check the flow's velocity at t = 0")


class _Diagnosis:
    """Says where a non-finite energy came from: the flow, or the field (the time step)."""

    def __init__(self, case, layout, timing: Timing):
        self.case, self.layout, self.timing = case, layout, timing
        self.last_steps = (0, 0)

    def non_finite(self, e: float, step: int, t: float, previous) -> str:
        flow, timing = self.case.flow, self.timing
        tableau = TABLEAUX[self.case.run.scheme]
        tau = getattr(flow, "renewal_time", None)
        first, last = self.last_steps
        for n in range(first, max(last, first + 1)):
            t0 = n * timing.dt
            stage_times = [t0 + 0.5 * timing.dt] if tau else sorted({t0 + c * timing.dt for c in tableau.c})
            for s in stage_times:
                u = self.layout.sample_velocity(flow, s)
                bad = int(self.layout.total(np.count_nonzero(~np.isfinite(u))))
                if bad:
                    return (f"the flow's velocity is not finite at t = {s:.6g} ({bad} of "
                            f"{int(self.layout.total(u.size))} values; {self.case.flow_type} flow): the magnetic energy became {e} at step {step}, "
                            f"t = {t:.6g}, because the flow did, not the time step; check the flow's definition "
                            "near that time")
        limit = tableau.advective_limit(timing.damping if timing.damping is not None else 0.0)
        return (f"the magnetic field became non-finite (energy {e}) at step {step}, t = {t:.6g} (last finite "
                f"ln E = {previous}), while the flow stayed finite at every stage of the last "
                f"{max(last - first, 1)} steps and the step is within the {tableau.name} stability limit "
                f"(dt sum_i max|u_i| k_max,i = {timing.courant:.3g} <= {limit:.3g}); the state itself is corrupt "
                "(an overflow or a fault): this is a bug to report, with the case file")


def _sample(record: Record, b_hat, layout, t, log_amp, indices, measures, step=0, diagnose=None) -> float:
    """Record one sample, renormalise ``b_hat`` to unit energy, return the new log-amplitude."""
    e = MAGNETIC_ENERGY.evaluate(layout, b_hat)
    previous = record.log_energy[-1] if record.log_energy else None
    if not math.isfinite(e) or e <= 0:
        if diagnose is not None and not math.isfinite(e):
            raise NumericalError(diagnose.non_finite(e, step, t, previous))
        raise NumericalError(f"magnetic energy became {e} at step {step}, t = {t:.6g} "
                             f"(last finite ln E = {previous}): the field vanished")
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
