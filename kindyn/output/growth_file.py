"""The netCDF record of one growth-rate run (``kindyn run``).

Contents: the sampled time series (``time``, ``magnetic_energy``, the running growth estimate), the
final field in physical space on ``(x, y, z)`` with no endpoint, the magnetic energy shell spectrum,
and global attributes with the result, the resolved case (JSON) and its text, the command and the
kindyn version. Time and rates are dimensionless, in the case's units (``units = "1"``; CF-1.8,
see :mod:`kindyn.output.netcdf`).
"""

from __future__ import annotations


import numpy as np

from kindyn.diagnostics.measures import MAGNETIC_ENERGY, SPECTRUM, run_series
from kindyn.diagnostics.spectra import resolution_caution
from kindyn.flows.scales import scale_rule
from kindyn.output.netcdf import add_grid, add_time, add_variable, atomic_dataset, provenance_attributes, set_attributes


def result_summary(case, outcome) -> dict:
    """The numbers a user asks for first (also printed by ``--json``)."""
    e = outcome.estimate
    flow = case.flow
    return {
        "growth_rate": _finite(e.growth_rate),
        "growth_rate_error": _finite(e.error),
        "frequency": _finite(e.frequency),
        "growth_rate_snapshot": _finite(e.growth_rate_snapshot),
        "growth_rate_uncertainty": _finite(e.uncertainty),
        "growth_rate_error_covers": e.covers,
        "growth_rate_error_this_grid": _finite(_error_this_grid(e)),
        "time_step_error": _finite(e.time_step_error),
        "grid_dependence_error": _finite(e.grid_error),
        "converged": bool(e.converged),
        "trustworthy": bool(getattr(outcome, "trustworthy", False)),
        "stop_reason": outcome.stop_reason,
        "note": e.note,
        "Rm": case.Rm,
        "eta": case.eta,
        "U": flow.speed,
        "scale_rule": scale_rule(flow),
        "u_rms": outcome.u_rms,
        "Rm_rms": outcome.u_rms / (case.eta * flow.wavenumber),
        "k_f": flow.wavenumber,
        "time": outcome.time,
        "steps": outcome.steps,
        "time_step": outcome.timing.dt,
        "cutoff_ratio": outcome.cutoff_ratio,
        "resolution_warning": bool(outcome.resolution_warning),
        "resolution_flags": list(getattr(outcome, "resolution_flags", ())),
        "diffusive_scale": _finite(getattr(outcome, "diffusive_scale", float("nan"))),
        "diffusive_resolution": _finite(getattr(outcome, "diffusive_resolution", float("nan"))),
        "shadow_grid": list(outcome.shadow_grid) if getattr(outcome, "shadow_grid", None) else None,
        "shadow_growth_rate": _finite(getattr(outcome, "shadow_growth_rate", float("nan"))),
        "mean_field_kept": False,
        "wall_seconds": outcome.wall_seconds,
        "resumed": outcome.resumed,
        "array_kernels": outcome.array_kernels,
        "array_kernels_note": outcome.array_kernels_note,
    }


def _error_this_grid(e) -> float:
    """The error without its grid-dependence part (fit and time step): what a study across grids
    (``kindyn sweep --grids``) compares its changes with, since it measures the grid dependence itself."""
    value = getattr(e, "error_this_grid", float("nan"))
    return e.error if value != value else value


def _finite(x):
    x = float(x)
    return x if np.isfinite(x) else None


def write_growth_file(path, case, outcome, field_physical=None, extra=None, command=None) -> None:
    """Write the run record to ``path`` atomically (``field_physical``: ``(3, nx, ny, nz)`` or None;
    ``command``: what wrote it, default the process's command line)."""
    rec = outcome.record
    summary = result_summary(case, outcome)
    with atomic_dataset(path) as ds:
        set_attributes(ds, {
            **provenance_attributes(case, f"kindyn kinematic dynamo run: {case.name}", command),
            "uniform_field_mode": "excluded: B has zero mean initially; the k = 0 mode is neutral and stays zero",
            "caution": "an under-resolved run can show spurious growth; check result_trustworthy (or "
                       "result_resolution_warning) and repeat on a finer grid",
            **{f"result_{k}": v for k, v in summary.items()},
            **(extra or {}),
        })
        ds.createDimension("time", len(rec.times))
        add_time(ds, "time", "time", np.asarray(rec.times))
        add_variable(ds, "magnetic_energy_log", ("time",), np.asarray(rec.log_energy),
                     long_name=f"natural logarithm of the {MAGNETIC_ENERGY.long_name} (renormalisation undone)")
        for measure in run_series(case.flow.z_independent):
            if measure.name in rec.series:
                add_variable(ds, measure.name, ("time", *measure.dims), np.asarray(rec.series[measure.name], float),
                             long_name=measure.long_name, units=measure.units)
        ds.createDimension("estimate", len(rec.estimate_times))
        add_time(ds, "estimate_time", "estimate", np.asarray(rec.estimate_times),
                 long_name="simulation time of the growth estimate")
        add_variable(ds, "growth_rate_estimate", ("estimate",), np.asarray(rec.estimate_rates, float),
                     long_name="running estimate of the amplitude growth rate gamma", units="1",
                     coordinates="estimate_time")
        add_variable(ds, "growth_rate_estimate_error", ("estimate",), np.asarray(rec.estimate_errors, float),
                     long_name="uncertainty of the running growth estimate", units="1",
                     coordinates="estimate_time")
        k, spectrum = outcome.spectrum
        ds.createDimension("wavenumber", k.size)
        add_variable(ds, "wavenumber", ("wavenumber",), k, long_name="shell wavenumber |k|")
        add_variable(ds, SPECTRUM.name, SPECTRUM.dims, spectrum, long_name=SPECTRUM.long_name, units=SPECTRUM.units)
        if field_physical is not None:
            add_grid(ds, case.box)
            for i, axis in enumerate("xyz"):
                add_variable(ds, f"magnetic_field_{axis}", ("x", "y", "z"), field_physical[i],
                             long_name=f"{axis} component of the final magnetic field (normalised to unit energy)")


def record_growth_run(path, case, outcome, command=None) -> tuple[dict, str]:
    """Write the run record (with the final field when ``output.field``) and return
    ``(summary, resolution caution or "")``: what ``kindyn run``, a sweep point and
    :meth:`kindyn.api.GrowthResult.to_netcdf` all do."""
    caution = ""
    if outcome.resolution_warning:
        caution = getattr(outcome, "resolution_caution", "") or \
            resolution_caution(outcome.cutoff_ratio, case.run.resolution_threshold)
    field = outcome.field if case.output.field else None
    write_growth_file(path, case, outcome, field, extra={"resolution_caution": caution}, command=command)
    return result_summary(case, outcome), caution
