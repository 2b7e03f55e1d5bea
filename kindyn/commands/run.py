"""``kindyn run CASE.toml``: integrate to a converged growth rate; write netCDF and a figure.

Results (growth rate with its error, frequency, converged or not, cautions, files written) go to
stdout; progress lines to stderr (``--quiet`` silences them); ``--json`` prints one object (with
``cautions``) and repeats the cautions on stderr. A run that stops (``max_time``, ``max_steps``)
before the growth estimate has an error says "not converged, no estimate yet" and reports
``growth_rate``, ``growth_rate_error`` and ``frequency`` as null (the value reached so far is
``growth_rate_preliminary``).
"""

from __future__ import annotations

import math

from kindyn.commands.common import (NO_ESTIMATE, Reporter, add_case_arguments, add_quiet_argument, case_from_args,
                                    number_text, output_folder, settle_estimate, with_error)
from kindyn.output.checkpoint import Checkpoint
from kindyn.output.growth_file import record_growth_run
from kindyn.run import run_growth

HELP = "integrate the induction equation until the growth rate converges"

def add_arguments(parser) -> None:
    add_case_arguments(parser)
    parser.add_argument("--fresh", action="store_true", help="ignore an existing checkpoint and start again")
    add_quiet_argument(parser)


def progress_line(t, estimate, tolerance) -> str:
    if not math.isfinite(estimate.growth_rate):
        return f"  t = {t:10.4g}   collecting samples"
    if not math.isfinite(estimate.error):
        return f"  t = {t:10.4g}   gamma = {estimate.growth_rate:+.6g} (no error estimate yet)"
    return (f"  t = {t:10.4g}   gamma = {estimate.growth_rate:+.6g} +- {estimate.error:.2g}"
            f"   (tolerance {tolerance:.2g}, {min(estimate.error / tolerance, 999):.3g}x)")


def result_lines(summary: dict, outcome) -> list[str]:
    """The human summary of one run (stdout); cautions are printed separately."""
    where = f"t = {outcome.time:.5g}, {outcome.steps} steps, {outcome.wall_seconds:.1f} s"
    scales = (f"Rm = U/(eta k_f) = {number_text(summary.get('Rm'))} with eta = {number_text(summary.get('eta'))}, "
              f"U = {number_text(summary.get('U'))}, k_f = {number_text(summary.get('k_f'))}; "
              f"Rm_rms = u_rms/(eta k_f) = {number_text(summary.get('Rm_rms'))}")
    if not summary["estimate_available"]:
        preliminary = summary["growth_rate_preliminary"]
        so_far = "" if preliminary is None else f" (gamma so far {preliminary:+.4g}, without an error bar)"
        note = f" ({summary['note']})" if summary.get("note") else ""
        return [f"growth rate: {NO_ESTIMATE}{so_far}; {outcome.stop_reason}{note}; {where}", scales]
    state = "converged" if summary["converged"] else f"NOT converged ({outcome.stop_reason})"
    gamma = with_error(summary["growth_rate"], summary["growth_rate_error"], sign=True)
    return [f"growth rate gamma = {gamma}, frequency omega = {number_text(summary['frequency'])}, {state}; {where}",
            scales]


def run_cautions(summary: dict, outcome, resolution: str) -> list[str]:
    cautions = [resolution] if resolution else []
    if not summary["estimate_available"]:
        cautions.append(f"{NO_ESTIMATE}: {outcome.stop_reason}; run longer (run.max_time) for a growth rate "
                        "with an error bar")
    elif not summary["converged"]:
        cautions.append(f"not converged ({outcome.stop_reason}): the growth rate carries its reported error, "
                        "which is above the tolerance")
    return cautions


def execute(args) -> int:
    report = Reporter("run", args)
    case = case_from_args(args)
    out = output_folder(args)
    nc_path, png_path = out / f"{case.name}.nc", out / f"{case.name}.png"
    checkpoint = Checkpoint(out / f"{case.name}.checkpoint.nc")
    if args.fresh:
        checkpoint.remove()
    report.progress(f"kindyn run {case.path}: {case.flow_type} flow, grid {list(case.box.grid)}, "
                    f"Rm = {case.Rm:.6g} (eta = {case.eta:.6g})")
    progress = None if report.quiet else (lambda t, e, tol: report.progress(progress_line(t, e, tol)))
    outcome = run_growth(case, progress=progress, checkpoint=checkpoint)
    summary, resolution = record_growth_run(nc_path, case, outcome)
    summary = settle_estimate(summary)
    if outcome.array_kernels_note:
        report.note(f"array kernels {outcome.array_kernels} ({outcome.array_kernels_note}); "
                    f"results are the same, only slower")
    if case.output.figure:
        from kindyn.output.figures import growth_figure

        e = outcome.estimate
        growth_figure(png_path, outcome.record.times, outcome.record.log_energy, e.growth_rate, e.error,
                      e.window, f"{case.name}: {case.flow_type}, Rm = {case.Rm:.4g}, grid {list(case.box.grid)}",
                      warning="possibly under-resolved" if outcome.resolution_warning else "")
    checkpoint.remove()
    summary["output"] = str(nc_path)
    summary["figure"] = str(png_path) if case.output.figure else None
    cautions = run_cautions(summary, outcome, resolution)
    summary["cautions"] = cautions
    for line in result_lines(summary, outcome):
        report.result(line)
    for caution in cautions:
        report.caution(caution)
    report.result(f"wrote {nc_path}" + (f" and {png_path}" if case.output.figure else ""))
    report.finish(summary)
    return 0
