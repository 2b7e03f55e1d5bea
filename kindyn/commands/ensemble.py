"""``kindyn ensemble CASE.toml --count N``: N realisations of a random flow, one growth rate each.

Realisation ``i`` is the case with ``flow.seed = s + i`` (``s`` the case's flow seed; the
``[magnetic] seed`` of the initial field is left as it is). Each run is an ordinary
:func:`kindyn.run.run_growth` written by :mod:`kindyn.output.growth_file` to ``NAME-seedS.nc``; the
ensemble is summarised in ``NAME-ensemble.nc`` and on the terminal (``--json``: one object):

    mean growth rate   gamma_bar = (1/N) sum gamma_i
    spread             s = sqrt( sum (gamma_i - gamma_bar)^2 / (N - 1) )   (realisation-to-realisation)
    standard error     s / sqrt(N)                                        (of the mean)

Only realisations with a finite growth rate enter; those that did not converge are counted and
flagged, since their rates carry an extra estimation error (``mean_run_error``). A realisation that
stopped before its own error estimate existed ("not converged, no estimate yet") still enters with
the rate its file holds (``estimate_available`` false, ``growth_rate_error`` null): the spread of
the ensemble, not the run, measures the uncertainty of the mean. The cautions of the members (resolution warnings, no estimate, not converged)
are carried into the summary: the ``cautions`` list (stdout, or the JSON and stderr with
``--json``), each member's ``resolution_warning`` and ``cutoff_ratio`` (JSON and netCDF variables)
and the netCDF attribute ``caution``. The summary file is written by
:mod:`kindyn.output.ensemble_file` (with the provenance every kindyn file carries).

Progress (stderr, off with ``--quiet``) shows each realisation's running estimate with the
elapsed time and an ETA for the whole ensemble: the realisations still to run at the mean wall
time of those done, plus the current one's own ETA (:mod:`kindyn.commands.progress`).
"""

from __future__ import annotations

import math

import numpy as np

from kindyn.case import load_case
from kindyn.case.ranges import check_seed_span
from kindyn.commands.common import (NO_ESTIMATE, Reporter, add_case_arguments, add_quiet_argument, case_from_args,
                                    clean_number, has_estimate, number_text, output_folder, results_kept,
                                    with_error)
from kindyn.commands.progress import Progress, growth_reporter
from kindyn.diagnostics.spectra import resolution_caution
from kindyn.errors import CaseError
from kindyn.output.ensemble_file import write_ensemble_file
from kindyn.output.growth_file import result_summary, write_growth_file
from kindyn.run import run_growth

HELP = "run N realisations of a random flow (flow seeds s, s+1, ...): mean growth rate, spread, standard error"


def add_arguments(parser) -> None:
    add_case_arguments(parser)
    parser.add_argument("--count", type=int, required=True, metavar="N", help="number of realisations")
    add_quiet_argument(parser)


def ensemble_statistics(rates) -> dict:
    """Mean, spread (sample standard deviation) and standard error of the finite rates."""
    values = np.asarray([r for r in rates if r is not None and math.isfinite(r)], float)
    n = values.size
    mean = float(values.mean()) if n else math.nan
    spread = float(values.std(ddof=1)) if n > 1 else math.nan
    return {"members_used": int(n), "mean_growth_rate": clean_number(mean), "spread": clean_number(spread),
            "standard_error": clean_number(spread / math.sqrt(n)) if n > 1 else None}


def member_cautions(members: list, threshold: float) -> list[str]:
    """The members' cautions, one line per kind (see module docstring)."""
    out = []
    count = len(members)

    def seeds(chosen):
        return ", ".join(str(m["seed"]) for m in chosen)

    warned = [m for m in members if m["resolution_warning"]]
    if warned:
        worst = max(warned, key=lambda m: m["cutoff_ratio"] if m["cutoff_ratio"] is not None else -1.0)
        text = worst.get("resolution_caution") or (
            resolution_caution(worst["cutoff_ratio"], threshold) if worst["cutoff_ratio"] is not None else
            "possibly under-resolved: under-resolved runs can show spurious growth; repeat on a finer grid")
        out.append(f"{len(warned)} of {count} realisation(s) may be under-resolved (flow seeds {seeds(warned)}; "
                   f"worst: seed {worst['seed']}): {text}")
    missing = [m for m in members if not m["estimate_available"]]
    if missing:
        out.append(f"{len(missing)} of {count} realisation(s) {NO_ESTIMATE} (flow seeds {seeds(missing)}): "
                   "their rates have no error bar of their own; the spread measures the scatter of the mean")
    unconverged = [m for m in members if m["estimate_available"] and not m["converged"]]
    if unconverged:
        out.append(f"{len(unconverged)} of {count} realisation(s) did not converge (flow seeds "
                   f"{seeds(unconverged)}): their rates carry their reported errors")
    return out


def execute(args) -> int:
    report = Reporter("ensemble", args)
    base = case_from_args(args)
    if args.count < 1:
        raise CaseError("--count", "count", args.count, "a whole number >= 1")
    first = getattr(base.flow, "seed", None)
    if isinstance(first, bool) or not isinstance(first, int):
        raise CaseError(base.path, "flow.type", base.flow_type,
                        "a random flow with a seed (e.g. \"random-helical\") for an ensemble")
    check_seed_span(base.path, first, args.count, f"--count {args.count}")
    cases = [load_case(args.case, [*args.overrides, f"flow.seed={first + i}"]) for i in range(args.count)]
    out = output_folder(args, base, [f"{base.name}-ensemble.nc", *(f"{c.name}-seed{first + i}.nc"
                                                                  for i, c in enumerate(cases))])
    members = []
    meter = EnsembleMeter(args.count, report)
    for i, case in enumerate(cases):
        seed = first + i
        report.progress(f"kindyn ensemble: realisation {i + 1}/{args.count}, flow seed {seed}, Rm = {case.Rm:.6g}")
        outcome = run_growth(case, progress=meter.member(case, i) if not report.quiet else None)
        meter.finished(i)
        path = out / f"{case.name}-seed{seed}.nc"
        caution = outcome.resolution_caution if outcome.resolution_warning else ""
        summary = result_summary(case, outcome)
        with results_kept(lambda: {"count": args.count, "first_seed": first, "members_finished": members,
                                   "member": {"seed": seed, **summary}}):  # if the file cannot be written
            write_growth_file(path, case, outcome, None,
                              extra={"ensemble_member": i, "flow_seed": seed, "resolution_caution": caution},
                              command=report.command_line)
        members.append({"seed": seed, "growth_rate": summary["growth_rate"],
                        "growth_rate_error": summary["growth_rate_error"], "converged": summary["converged"],
                        "estimate_available": has_estimate(summary),
                        "stop_reason": summary["stop_reason"],
                        "resolution_warning": bool(outcome.resolution_warning),
                        "cutoff_ratio": clean_number(outcome.cutoff_ratio), "resolution_caution": caution,
                        "output": str(path)})
        report.progress("  " + member_line(members[-1]))
    stats = ensemble_statistics([m["growth_rate"] for m in members])
    errors = [m["growth_rate_error"] for m in members if m["growth_rate_error"] is not None]
    unconverged = sum(not m["converged"] for m in members)
    cautions = member_cautions(members, base.run.resolution_threshold)
    result = {"count": args.count, "first_seed": first, "Rm": base.Rm, "eta": base.eta, **stats,
              "mean_run_error": clean_number(float(np.mean(errors))) if errors else None,
              "unconverged": unconverged,
              "resolution_warnings": sum(m["resolution_warning"] for m in members),
              "resolution_warning": any(m["resolution_warning"] for m in members),
              "cautions": cautions, "members": members}
    path = out / f"{base.name}-ensemble.nc"
    with results_kept(lambda: result):  # if the file cannot be written
        write_ensemble_file(path, base, result, command=report.command_line)
    result["output"] = str(path)
    for m in members:
        report.result(f"  flow seed {m['seed']}: {member_line(m)}")
    mean = number_text(result["mean_growth_rate"], sign=True) if result["standard_error"] is None else \
        with_error(result["mean_growth_rate"], result["standard_error"], sign=True) + " (standard error)"
    report.result(f"ensemble of {args.count} at Rm = {base.Rm:.6g}: mean gamma = {mean}, "
                  f"spread = {number_text(result['spread'])}, {result['members_used']} realisation(s) used"
                  + (f"; {unconverged} did not converge" if unconverged else ""))
    for caution in cautions:
        report.caution(caution)
    report.result(f"wrote {path}")
    report.finish(result)
    return 0


def member_line(m: dict) -> str:
    if not m["estimate_available"]:
        rate = "" if m["growth_rate"] is None else f"; gamma = {m['growth_rate']:+.4g} without an error bar"
        return f"{NO_ESTIMATE} ({m['stop_reason']}{rate})" + (
            ", possibly under-resolved" if m["resolution_warning"] else "")
    state = "converged" if m["converged"] else m["stop_reason"]
    text = f"gamma = {with_error(m['growth_rate'], m['growth_rate_error'], sign=True)} ({state})"
    return text + (", possibly under-resolved" if m["resolution_warning"] else "")


class EnsembleMeter:
    """Progress of an ensemble: each member's running estimate with the ETA of the whole ensemble."""

    def __init__(self, count: int, report):
        import time

        self.count, self.report, self.clock = count, report, time.monotonic
        self.started = self.clock()
        self.member_started = self.started
        self.done_seconds: list[float] = []

    def member(self, case, index: int):
        self.member_started = self.clock()

        def sink(update: Progress) -> None:
            current = self.clock() - self.member_started
            per_member = (sum(self.done_seconds) / len(self.done_seconds) if self.done_seconds else
                          (current + update.eta if update.eta is not None else None))
            eta = None
            if update.eta is not None and per_member is not None:
                eta = update.eta + per_member * (self.count - index - 1)
            self.report.update(Progress("ensemble", f"  [{index + 1}/{self.count}]" + update.text,
                                        self.clock() - self.started, eta, None, "all realisations"), force=True)

        return growth_reporter(case, sink, command="ensemble")

    def finished(self, index: int) -> None:
        self.done_seconds.append(self.clock() - self.member_started)
