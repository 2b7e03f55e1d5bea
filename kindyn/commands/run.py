"""``kindyn run CASE.toml``: integrate to a converged growth rate; write netCDF and a figure."""

from __future__ import annotations

import math

from kindyn.commands.common import add_case_arguments, case_from_args, output_folder, print_json, say
from kindyn.output.checkpoint import Checkpoint
from kindyn.output.growth_file import record_growth_run
from kindyn.run import run_growth

HELP = "integrate the induction equation until the growth rate converges"



def add_arguments(parser) -> None:
    add_case_arguments(parser)
    parser.add_argument("--fresh", action="store_true", help="ignore an existing checkpoint and start again")
    parser.add_argument("--quiet", action="store_true", help="no progress lines on stderr")


def progress_line(t, estimate, tolerance) -> str:
    if not math.isfinite(estimate.growth_rate):
        return f"  t = {t:10.4g}   collecting samples"
    return (f"  t = {t:10.4g}   gamma = {estimate.growth_rate:+.6g} +- {estimate.error:.2g}"
            f"   (tolerance {tolerance:.2g}, {min(estimate.error / tolerance, 999):.3g}x)")


def execute(args) -> int:
    case = case_from_args(args)
    out = output_folder(args)
    nc_path, png_path = out / f"{case.name}.nc", out / f"{case.name}.png"
    checkpoint = Checkpoint(out / f"{case.name}.checkpoint.nc")
    if args.fresh:
        checkpoint.remove()
    if not args.quiet:
        say(f"kindyn run {case.path}: {case.flow_type} flow, grid {list(case.box.grid)}, "
            f"Rm = {case.Rm:.6g} (eta = {case.eta:.6g})")
    progress = None if args.quiet else (lambda t, e, tol: say(progress_line(t, e, tol)))
    outcome = run_growth(case, progress=progress, checkpoint=checkpoint)
    summary, caution = record_growth_run(nc_path, case, outcome)
    if caution:
        say(f"kindyn run: warning: {caution}")
    if outcome.array_kernels_note:
        say(f"kindyn run: note: array kernels {outcome.array_kernels} ({outcome.array_kernels_note}); "
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
    if args.json:
        print_json(summary)
    if not args.quiet:
        state = "converged" if summary["converged"] else f"NOT converged ({outcome.stop_reason})"
        gamma = summary["growth_rate"]
        text = "n/a" if gamma is None else f"{gamma:+.6g} +- {summary['growth_rate_error']:.2g}"
        omega = summary["frequency"]
        omega_text = "n/a" if omega is None else f"{omega:.6g}"
        say(f"growth rate gamma = {text}, frequency omega = {omega_text}, {state}; "
            f"t = {outcome.time:.5g}, {outcome.steps} steps, {outcome.wall_seconds:.1f} s")
        say(f"wrote {nc_path}" + (f" and {png_path}" if case.output.figure else ""))
    return 0
