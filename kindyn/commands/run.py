"""``kindyn run CASE.toml``: integrate to a converged growth rate; write netCDF and a figure.

Results (growth rate with its error, frequency, converged or not, cautions, files written) go to
stdout; progress lines to stderr (``--quiet`` silences them); ``--json`` prints one object (with
``cautions``) and repeats the cautions on stderr. A run that stops (``max_time``, ``max_steps``)
before the growth estimate has an error says "not converged, no estimate yet" and reports
``growth_rate``, ``growth_rate_error`` and ``frequency`` as null (the value reached so far is
``growth_rate_preliminary``).

Progress (stderr, every two seconds, off with ``--quiet``) shows the running estimate with the
elapsed time and an ETA (:class:`kindyn.commands.progress.GrowthEta`: from how fast the error
falls towards the tolerance, else from ``max_time``). A run that resumes from a checkpoint says so
(a note on stderr, also with ``--quiet``; ``resumed`` in the JSON and the file).
"""

from __future__ import annotations


from kindyn.commands.common import (NO_ESTIMATE, Reporter, add_case_arguments, add_figure_arguments,
                                    add_quiet_argument, case_from_args, number_text, output_folder, results_kept,
                                    settle_estimate, with_error)
from kindyn.commands.progress import growth_progress_text, growth_reporter
from kindyn.output.checkpoint import Checkpoint
from kindyn.output.growth_file import record_growth_run, result_summary
from kindyn.run import default_tolerance, run_growth

HELP = "integrate the induction equation until the growth rate converges"

def add_arguments(parser) -> None:
    add_case_arguments(parser)
    parser.add_argument("--fresh", action="store_true", help="ignore an existing checkpoint and start again")
    add_quiet_argument(parser)
    add_figure_arguments(parser)


progress_line = growth_progress_text  # the progress line without elapsed time and ETA


class AnnouncingCheckpoint(Checkpoint):
    """A checkpoint that tells ``say`` when the run resumes from it (time, step, samples), and when
    it is discarded or cannot be written (one line each)."""

    def __init__(self, path, say):
        super().__init__(path, notify=say)
        self.say = say

    def load(self, case):
        state = super().load(case)
        if state:
            self.say(f"resuming from the checkpoint {self.path} at t = {state['time']:.6g} (step {state['step']}, "
                     f"{len(state['record']['times'])} samples); --fresh starts again")
        return state


def growth_figure_of(path, case, outcome, summary=None, style=None) -> None:
    """The figure of a run (``kindyn run`` and :meth:`kindyn.api.GrowthResult.figure`)."""
    from kindyn.output.figures import FigureStyle, growth_figure

    e, rec = outcome.estimate, outcome.record
    converged = bool(e.converged and outcome.stop_reason == "converged")
    growth_figure(path, rec.times, rec.log_energy, e.growth_rate, e.error, e.window,
                  f"{case.name}: {case.flow_type} flow, Rm = {case.Rm:.4g}, grid "
                  f"{'x'.join(map(str, case.box.grid))}",
                  warning="possibly under-resolved" if outcome.resolution_warning else "",
                  converged=converged, stop_reason="" if converged else outcome.stop_reason,
                  estimate_times=rec.estimate_times, estimate_rates=rec.estimate_rates,
                  estimate_errors=rec.estimate_errors, tolerance=default_tolerance(case),
                  U=case.flow.speed, k_f=case.flow.wavenumber, style=style or FigureStyle.from_output(case.output))


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
    covers = summary.get("growth_rate_error_covers") or "fit"
    trust = ("yes" if summary.get("trustworthy") else
             "NO (" + ("a resolution criterion tripped" if summary.get("resolution_warning") else "not converged") + ")")
    return [f"growth rate gamma = {gamma}, frequency omega = {number_text(summary['frequency'])}, {state}; {where}",
            f"growth_rate_uncertainty = {number_text(summary.get('growth_rate_uncertainty'), 2)} (calibrated "
            f"estimate; the +- above is a safe bound covering {covers}); trustworthy: {trust}",
            scales]


def run_cautions(summary: dict, outcome, resolution: str) -> list[str]:
    cautions = [resolution] if resolution else []
    if not summary["estimate_available"]:
        longer = "run.max_steps" if "max_steps" in outcome.stop_reason else "run.max_time"
        cautions.append(f"{NO_ESTIMATE}: {outcome.stop_reason}; run longer ({longer}) for a growth rate "
                        "with an error bar")
    elif not summary["converged"]:
        cautions.append(f"not converged ({outcome.stop_reason}): the growth rate carries its reported error, "
                        "which is above the tolerance")
    return cautions


def execute(args) -> int:
    report = Reporter("run", args)
    case = case_from_args(args)
    out = output_folder(args, case, [f"{case.name}.nc", f"{case.name}.{case.output.figure_format}",
                                     f"{case.name}.checkpoint.nc"])
    nc_path, png_path = out / f"{case.name}.nc", out / f"{case.name}.{case.output.figure_format}"
    checkpoint = AnnouncingCheckpoint(out / f"{case.name}.checkpoint.nc", report.note)
    if args.fresh:
        checkpoint.remove()
    report.progress(f"kindyn run {case.path}: {case.flow_type} flow, grid {list(case.box.grid)}, "
                    f"Rm = {case.Rm:.6g} (eta = {case.eta:.6g})")
    progress = None if report.quiet else growth_reporter(case, lambda p: report.update(p, force=True))
    outcome = run_growth(case, progress=progress, checkpoint=checkpoint)
    if outcome.field is None:  # not the first of several MPI processes: that one writes and reports
        return 0
    kept = (lambda: settle_estimate(result_summary(case, outcome)))  # if a file cannot be written
    note = f"; the checkpoint {checkpoint.path} is kept" if checkpoint.path.exists() else ""
    with results_kept(kept, note):
        summary, resolution = record_growth_run(nc_path, case, outcome, command=report.command_line)
        summary = settle_estimate(summary)
        if outcome.array_kernels_note:
            report.note(f"array kernels {outcome.array_kernels} ({outcome.array_kernels_note}); "
                        f"results are the same, only slower")
        if case.output.figure:
            growth_figure_of(png_path, case, outcome)
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
