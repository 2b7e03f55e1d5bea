"""``kindyn ensemble CASE.toml --count N``: N realisations of a random flow, one growth rate each.

Realisation ``i`` is the case with ``flow.seed = s + i`` (``s`` the case's flow seed; the
``[magnetic] seed`` of the initial field is left as it is). Each run is an ordinary
:func:`kindyn.run.run_growth` written by :mod:`kindyn.output.growth_file` to ``NAME-seedS.nc``; the
ensemble is summarised in ``NAME-ensemble.nc`` and on the terminal (``--json``: one object):

    mean growth rate   gamma_bar = (1/N) sum gamma_i
    spread             s = sqrt( sum (gamma_i - gamma_bar)^2 / (N - 1) )   (realisation-to-realisation)
    standard error     s / sqrt(N)                                        (of the mean)

Only realisations with a finite growth rate enter; those that did not converge are counted and
flagged, since their rates carry an extra estimation error (``mean_run_error``).
"""

from __future__ import annotations

import math

import numpy as np

from kindyn.case import load_case
from kindyn.commands.common import add_case_arguments, case_from_args, clean_number, output_folder, print_json, say
from kindyn.errors import CaseError
from kindyn.output.growth_file import result_summary, write_growth_file
from kindyn.output.netcdf import CONVENTIONS, add_variable, atomic_dataset, set_attributes
from kindyn.run import run_growth

HELP = "run N realisations of a random flow (flow seeds s, s+1, ...): mean growth rate, spread, standard error"


def add_arguments(parser) -> None:
    add_case_arguments(parser)
    parser.add_argument("--count", type=int, required=True, metavar="N", help="number of realisations")
    parser.add_argument("--quiet", action="store_true", help="no progress lines on stderr")


def ensemble_statistics(rates) -> dict:
    """Mean, spread (sample standard deviation) and standard error of the finite rates."""
    values = np.asarray([r for r in rates if r is not None and math.isfinite(r)], float)
    n = values.size
    mean = float(values.mean()) if n else math.nan
    spread = float(values.std(ddof=1)) if n > 1 else math.nan
    return {"members_used": int(n), "mean_growth_rate": clean_number(mean), "spread": clean_number(spread),
            "standard_error": clean_number(spread / math.sqrt(n)) if n > 1 else None}


def execute(args) -> int:
    base = case_from_args(args)
    if args.count < 1:
        raise CaseError("--count", "count", args.count, "a whole number >= 1")
    first = getattr(base.flow, "seed", None)
    if isinstance(first, bool) or not isinstance(first, int):
        raise CaseError(base.path, "flow.type", base.flow_type,
                        "a random flow with a seed (e.g. \"random-helical\") for an ensemble")
    out = output_folder(args)
    members = []
    for i in range(args.count):
        seed = first + i
        case = load_case(args.case, [*args.overrides, f"flow.seed={seed}"])
        if not args.quiet:
            say(f"kindyn ensemble: realisation {i + 1}/{args.count}, flow seed {seed}, Rm = {case.Rm:.6g}")
        outcome = run_growth(case)
        path = out / f"{case.name}-seed{seed}.nc"
        write_growth_file(path, case, outcome, None, extra={"ensemble_member": i, "flow_seed": seed})
        summary = result_summary(case, outcome)
        members.append({"seed": seed, "growth_rate": summary["growth_rate"],
                        "growth_rate_error": summary["growth_rate_error"], "converged": summary["converged"],
                        "stop_reason": summary["stop_reason"], "output": str(path)})
        if not args.quiet:
            rate, error = summary["growth_rate"], summary["growth_rate_error"]
            say(f"  gamma = {'n/a' if rate is None else f'{rate:+.6g}'} +- {'n/a' if error is None else f'{error:.2g}'}"
                f" ({'converged' if summary['converged'] else outcome.stop_reason})")
    stats = ensemble_statistics([m["growth_rate"] for m in members])
    errors = [m["growth_rate_error"] for m in members if m["growth_rate_error"] is not None]
    unconverged = sum(not m["converged"] for m in members)
    result = {"count": args.count, "first_seed": first, "Rm": base.Rm, "eta": base.eta, **stats,
              "mean_run_error": clean_number(float(np.mean(errors))) if errors else None,
              "unconverged": unconverged, "members": members}
    path = out / f"{base.name}-ensemble.nc"
    _write_ensemble_file(path, base, result)
    result["output"] = str(path)
    if args.json:
        print_json(result)
    if not args.quiet:
        def num(value):
            return "n/a" if value is None else f"{value:.6g}"

        say(f"ensemble of {args.count}: mean gamma = {num(result['mean_growth_rate'])}, spread = "
            f"{num(result['spread'])}, standard error = {num(result['standard_error'])}"
            + (f"; {unconverged} realisation(s) did not converge" if unconverged else ""))
        say(f"wrote {path}")
    return 0


def _write_ensemble_file(path, case, result: dict) -> None:
    members = result["members"]

    def column(key):
        return np.asarray([np.nan if m[key] is None else float(m[key]) for m in members])

    with atomic_dataset(path) as ds:
        set_attributes(ds, {"Conventions": CONVENTIONS, "title": f"kindyn ensemble of {case.name}",
                            "case_file": case.path, "case_text": case.text,
                            **{f"result_{k}": v for k, v in result.items() if k != "members"}})
        ds.createDimension("member", len(members))
        add_variable(ds, "flow_seed", ("member",), np.asarray([m["seed"] for m in members]), dtype="i8",
                     long_name="flow seed of the realisation")
        add_variable(ds, "growth_rate", ("member",), column("growth_rate"),
                     long_name="amplitude growth rate gamma of the realisation")
        add_variable(ds, "growth_rate_error", ("member",), column("growth_rate_error"),
                     long_name="estimation uncertainty of gamma within the run")
        add_variable(ds, "converged", ("member",), np.asarray([int(m["converged"]) for m in members]),
                     dtype="i1", long_name="1 when the run's estimate converged")
