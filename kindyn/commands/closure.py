"""``kindyn closure CASE.toml``: does the mean-field closure work at this scale separation?

For every test-field wavenumber ``K`` of the case's ``[testfield]`` section (``modes`` in the case
box, which may hold several periods of the flow along the averaging axis), the growth rate of the
mean-field mode is predicted from the measured coefficients at K, from SOCA, from the local
(``K -> 0``) closure and, for steady flows, from test fields at the mode's own growth rate with its
harmonics coupled; each is set beside the growth rate of a direct run (``kindyn run``) in the box whose
length along the axis is ``2 pi / K`` (see :mod:`kindyn.testfield.scales`). The keys are those of
``[testfield]`` (``axis``, ``modes``, ``closure_coupling``, ``solver_tolerance``, ...) and ``[run]``
for the direct runs.

Writes ``NAME-closure.nc`` (:mod:`kindyn.output.closure_file`) and ``NAME-closure.png`` (growth rates
and relative differences versus K). The text report (stdout) gives, per K, the direct run's rate with
its error and every prediction with its relative difference, the difference in combined errors and
whether the closure holds there; ``--json`` prints the same as one object: ``K``,
``scale_separation``, ``direct_growth_rate``, ``direct_growth_rate_error``,
``direct_box_scale_mean_share``, ``predictions`` (name -> ``growth_rate``, ``error``,
``relative_difference``, ``difference_in_errors``, ``holds``), ``local_closure``, ``harmonics``,
``memory``, ``cautions``.
"""

from __future__ import annotations

import json
import math

import numpy as np

from kindyn.commands.common import (Reporter, add_case_arguments, add_figure_arguments, add_quiet_argument,
                                    case_from_args, number_text, output_folder, results_kept,
                                    with_error)
from kindyn.testfield.scales import AGREEMENT_SIGMAS, LABELS, PREDICTIONS, compare_scales
from kindyn.testfield.summary import nested

HELP = "closure across scales: mean-field growth rates from test-field coefficients beside direct runs"


def add_arguments(parser) -> None:
    add_case_arguments(parser)
    add_quiet_argument(parser)
    add_figure_arguments(parser)


def direct_run(case):
    """The direct run of one mean-field mode (``kindyn run`` on the shrunk case): ``(rate, error, b_hat,
    caution)``; the caution says when the run did not converge or may be under-resolved."""
    from kindyn.run import run_growth

    outcome = run_growth(case)
    notes = []
    if not (outcome.estimate.converged and outcome.stop_reason == "converged"):
        notes.append(f"not converged ({outcome.stop_reason})")
    if outcome.resolution_warning:
        notes.append(outcome.resolution_caution)
    return outcome.estimate.growth_rate, outcome.estimate.error, outcome.field_hat, "; ".join(notes)


def table_of(comparison) -> dict:
    """Plain arrays of a :class:`~kindyn.testfield.scales.ScaleComparison` (for the file and JSON)."""
    c = comparison
    r = c.calibration
    a, h = r.horizontal()
    a_s, h_s = r.horizontal(soca=True)
    return {
        "K": c.K, "predictions": list(PREDICTIONS), "labels": dict(LABELS), "sigmas": AGREEMENT_SIGMAS,
        "growth_rate": np.stack([c.predictions[n] for n in PREDICTIONS]),
        "growth_rate_error": np.stack([c.prediction_errors[n] for n in PREDICTIONS]),
        "relative_difference": np.stack([c.relative(n) for n in PREDICTIONS]),
        "difference_in_errors": np.stack([c.sigmas(n) for n in PREDICTIONS]),
        "closure_holds": np.stack([c.holds(n) for n in PREDICTIONS]),
        "direct_growth_rate": c.direct, "direct_growth_rate_error": c.direct_error,
        "direct_box_length": c.direct_length, "direct_box_scale_mean_share": c.direct_share,
        "scale_separation": c.k_f / c.K, "soca_expected_departure": c.soca_expected_departure,
        "alpha_horizontal": a, "eta_t": h, "alpha_horizontal_soca": a_s, "eta_t_soca": h_s,
    }


def summary_of(case, comparison, table, cautions) -> dict:
    c = comparison
    return {
        "K": nested(c.K), "axis": "xyz"[c.axis], "Rm": case.Rm, "eta": case.eta, "k_f": c.k_f,
        "flow_periods_in_box": c.periods, "scale_separation": nested(table["scale_separation"]),
        "direct_growth_rate": nested(c.direct), "direct_growth_rate_error": nested(c.direct_error),
        "direct_box_length": nested(c.direct_length), "direct_box_scale_mean_share": nested(c.direct_share),
        "predictions": {n: {"label": LABELS[n], "growth_rate": nested(c.predictions[n]),
                            "error": nested(c.prediction_errors[n]), "relative_difference": nested(c.relative(n)),
                            "difference_in_errors": nested(c.sigmas(n)),
                            "holds": [None if v < 0 else bool(v) for v in c.holds(n)]} for n in PREDICTIONS},
        "soca_expected_departure": nested(c.soca_expected_departure),
        "agreement_sigmas": AGREEMENT_SIGMAS,
        "local_closure": {k: (nested(v) if isinstance(v, float) else v) for k, v in c.local.items()},
        "harmonics": c.harmonics,
        "memory": [{k: ({kk: (nested(vv) if isinstance(vv, float) else vv) for kk, vv in v.items()} if v else None)
                    for k, v in d.items()} for d in c.memory_details],
        "cautions": cautions,
    }


def text_report(case, comparison) -> list[str]:
    c = comparison
    lines = [f"{case.name}: {case.flow_type} flow, Rm = {case.Rm:.6g} (eta = {case.eta:.6g}), mean fields along "
             f"{'xyz'[c.axis]}, {c.periods} flow period(s) in the box; closure holds = within "
             f"{AGREEMENT_SIGMAS:g} combined errors of the direct run"]
    if c.local:
        lines.append(f"local closure: alpha(0) = {number_text(c.local['alpha0'], 6, True)} (uniform test fields), "
                     f"eta_t(0) = {number_text(c.local['eta_t0'], 6, True)} ({c.local['eta_t0_source']})")
    for i, K in enumerate(c.K):
        d = c.direct[i]
        where = (f"direct run in L_{'xyz'[c.axis]} = {c.direct_length[i]:.6g}, box-scale share "
                 f"{number_text(c.direct_share[i], 2)}") if math.isfinite(d) else "no direct run"
        direct = with_error(d, c.direct_error[i], True) if math.isfinite(d) else "n/a"
        lines.append(f"K = {K:.6g} (k_f/K = {c.k_f / K:.3g}; {where}): direct p = {direct}")
        for n in PREDICTIONS:
            p = c.predictions[n][i]
            if not math.isfinite(p):
                lines.append(f"    {n:16s} n/a")
                continue
            e = c.prediction_errors[n][i]
            value = with_error(p, e, True) if math.isfinite(e) else number_text(p, 7, True) + " (no statistical error)"
            rel, sig, holds = c.relative(n)[i], c.sigmas(n)[i], c.holds(n)[i]
            verdict = {1: "holds", 0: "does NOT hold", -1: ""}[int(holds)]
            extra = (f"; relative difference {rel:+.3g} ({sig:.3g} errors) {verdict}" if math.isfinite(rel) else "")
            lines.append(f"    {n:16s} p = {value}{extra}")
        dep = c.soca_expected_departure[i]
        if math.isfinite(d) and math.isfinite(dep):
            lines.append(f"    SOCA departs by {c.predictions['soca'][i] - d:+.4g} from the direct run; its coefficients "
                         f"imply {dep:+.4g} (p_soca - p_measured)")
    return lines


def closure_cautions(comparison) -> list[str]:
    """The cautions of a comparison (its notes, the calibration's notes and findings)."""
    from kindyn.commands.testfield import finding_lines

    return list(comparison.notes) + list(comparison.calibration.notes) + finding_lines(comparison.calibration)


def file_attributes(comparison, summary, cautions) -> dict:
    """The global attributes of ``NAME-closure.nc`` beyond the case's."""
    return {
        "caution": "; ".join(cautions),
        "local_closure": json.dumps(summary["local_closure"]),
        "harmonics": json.dumps(comparison.harmonics),
        "memory": json.dumps(summary["memory"]),
        "agreement": f"a closure holds where |p - p_direct| <= {AGREEMENT_SIGMAS:g} sqrt(err^2 + err_direct^2)",
        "averaging_axis": "xyz"[comparison.axis],
        "flow_periods_in_box": comparison.periods,
    }


def closure_figure_of(path, case, comparison, style=None) -> None:
    """The figure of ``kindyn closure`` (and :meth:`kindyn.api.results.ClosureResult.figure`)."""
    from kindyn.output.figures import FigureStyle
    from kindyn.output.figures_testfield import closure_figure
    from kindyn.testfield.settings import plan_from_case

    shown = ("measured", "soca", "local", "memory")
    closure_figure(path, comparison.K, comparison.direct, comparison.direct_error,
                   {LABELS[n]: (comparison.predictions[n], comparison.prediction_errors[n]) for n in shown},
                   f"{case.name}: {case.flow_type}, Rm = {case.Rm:.4g}: closures versus direct runs",
                   note=f"direct runs in boxes with L = 2 pi/K; memory: test fields at the mode's own p, "
                        f"harmonics coupled to order {plan_from_case(case).closure_coupling}",
                   style=style or FigureStyle.from_output(case.output))


def compare(case, progress=None):
    """``(comparison, table, summary, cautions)`` of ``case`` (the command and :func:`kindyn.api.closure`);
    ``progress(text)`` receives progress lines."""
    from kindyn.testfield.calibration import calibrate

    comparison = compare_scales(case, calibrate, direct_run, progress)
    table = table_of(comparison)
    cautions = closure_cautions(comparison)
    return comparison, table, summary_of(case, comparison, table, cautions), cautions


def execute(args) -> int:
    report = Reporter("closure", args)
    case = case_from_args(args)
    from kindyn.output.figures import FigureStyle
    from kindyn.testfield.settings import plan_from_case

    plan_from_case(case)  # every check that needs the box, before any output folder is made
    style = FigureStyle.from_output(case.output)
    png_name = style.path(".", f"{case.name}-closure").name
    out = output_folder(args, case, [f"{case.name}-closure.nc", png_name])
    nc_path = out / f"{case.name}-closure.nc"
    png_path = out / png_name
    report.progress(f"kindyn closure {case.path}: {case.flow_type} flow, grid {list(case.box.grid)}, "
                    f"Rm = {case.Rm:.6g}, K = {2 * math.pi / case.box.lengths[plan_from_case(case).axis]:.4g} x "
                    f"{list(case.testfield.modes or [1])}")
    progress = None if report.quiet else (lambda text: report.progress("  " + text))
    comparison, table, summary, cautions = compare(case, progress)
    from kindyn.output.closure_file import write_closure_file

    with results_kept(lambda: summary):  # if a file cannot be written
        write_closure_file(nc_path, case, table, file_attributes(comparison, summary, cautions),
                           command=report.command_line)
        if case.output.figure:
            closure_figure_of(png_path, case, comparison, style)
    summary["output"] = str(nc_path)
    summary["figure"] = str(png_path) if case.output.figure else None
    for line in text_report(case, comparison):
        report.result(line)
    for caution in cautions:
        report.caution(caution)
    report.result(f"wrote {nc_path}" + (f" and {png_path}" if case.output.figure else ""))
    report.finish(summary)
    return 0
