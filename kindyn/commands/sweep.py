"""``kindyn sweep CASE.toml``: growth rate at every point of a sweep, critical values, dynamo windows.

Points run in local worker processes (default: as many as fit, workers x threads-per-run <= cores)
or on a Dask distributed cluster (``--scheduler ADDRESS``). Re-running the same command reuses
every finished point (identified by the content of its resolved case) and runs the rest.
"""

from __future__ import annotations

from pathlib import Path

from kindyn.commands.common import add_case_arguments, clean_number, print_json, say
from kindyn.errors import ParameterError

HELP = "run a parameter sweep (e.g. growth rate versus Rm): dynamo windows, resolution studies, Dask clusters"


def add_arguments(parser) -> None:
    add_case_arguments(parser)
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="local worker processes (default: cores // threads-per-run)")
    parser.add_argument("--threads-per-run", type=int, default=None, metavar="T",
                        help="FFT threads of each run (default: the case's numerics.threads)")
    parser.add_argument("--scheduler", default=None, metavar="ADDRESS",
                        help="run on a Dask distributed cluster: scheduler address (tcp://host:8786) or scheduler file")
    parser.add_argument("--refine", action="store_true",
                        help="refine every sign change of gamma by bracketing runs ([sweep] refine_runs, refine_width)")
    parser.add_argument("--grids", default=None, metavar="LIST",
                        help='resolution study: also sweep domain.grid over e.g. "16,24,32" or "16x16x32,24x24x48"')
    parser.add_argument("--no-figure", action="store_true", help="do not write the sweep figure")
    parser.add_argument("--quiet", action="store_true", help="no progress lines on stderr")


def execute(args) -> int:
    from kindyn.sweep.driver import SweepOptions, run_sweep
    from kindyn.sweep.resolution import parse_grids

    if args.threads_per_run is not None and args.threads_per_run < 1:
        raise ParameterError("--threads-per-run", args.threads_per_run, "a whole number >= 1")
    if args.workers is not None and args.scheduler:
        raise ParameterError("--workers", args.workers, "no --workers with --scheduler (the cluster has its workers)")
    options = SweepOptions(out=Path(args.out), workers=args.workers, threads=args.threads_per_run,
                           scheduler=args.scheduler, refine=True if args.refine else None,
                           grids=parse_grids(args.grids) if args.grids else None,
                           figure=False if args.no_figure else None, say=None if args.quiet else say)
    result = run_sweep(args.case, args.overrides, options)
    if args.json:
        print_json(json_report(result))
    if not args.quiet:
        for line in report_lines(result):
            say(line)
    return 0


def json_report(result) -> dict:
    points = []
    for row in result.rows:
        entry = dict(row["values"])
        entry.update({k: (clean_number(row[k]) if isinstance(row.get(k), float) else row.get(k))
                      for k in ("growth_rate", "growth_rate_error", "frequency", "converged", "status", "message",
                                "Rm", "resolution_warning", "wall_seconds")})
        entry.update({"output": row["output"], "identity": row["identity"], "reused": row["reused"],
                      "refinement": row["refinement"]})
        points.append(entry)
    return {"summary": str(result.summary_path), "figure": str(result.figure_path) if result.figure_path else None,
            "keys": list(result.spec.keys), "critical_key": result.spec.critical, "points": points,
            "critical": [_finite_dict(c) for c in result.critical], "windows": result.windows,
            "resolution": result.resolution, "cautions": result.cautions, "wall_seconds": result.wall_seconds}


def _finite_dict(c: dict) -> dict:
    return {k: (clean_number(v) if isinstance(v, float) else v) for k, v in c.items()}


def _end(end: dict) -> str:
    return f"{end['value']:.5g} +- {end['uncertainty']:.2g}"


def report_lines(result) -> list[str]:
    key = result.spec.critical
    lines = []
    for c in result.critical:
        where = ", ".join(f"{k} = {v}" for k, v in c["line"].items())
        lines.append(f"gamma {'turns positive' if c['direction'] == 'opens' else 'turns negative'} at "
                     f"{key} = {c['value']:.5g} +- {c['uncertainty']:.2g}"
                     f" (between {c['bracket'][0]:.5g} and {c['bracket'][1]:.5g})" + (f" for {where}" if where else ""))
    for w in result.windows:
        low = _end(w["lower"]) if w["lower"] else f"below {w['scan'][0]:g}"
        high = _end(w["upper"]) if w["upper"] else f"above {w['scan'][1]:g}"
        where = ", ".join(f"{k} = {v}" for k, v in w["line"].items())
        lines.append(f"dynamo window: {low} < {key} < {high}" + (f" for {where}" if where else ""))
    for entry in result.resolution:
        gammas = ", ".join(f"{'x'.join(map(str, g))}: {v:+.5g} +- {e:.2g}"
                           for g, v, e in zip(entry["grids"], entry["growth_rates"], entry["growth_rate_errors"]))
        verdict = "resolved" if entry["resolved"] else "NOT resolved"
        fixed = ", ".join(f"{k} = {v}" for k, v in entry["fixed"].items())
        lines.append(f"resolution study{' (' + fixed + ')' if fixed else ''}: {gammas}; last change "
                     f"{entry['changes'][-1]:+.3g} (combined uncertainty {entry['combined_errors'][-1]:.2g}): "
                     + verdict)
    for caution in result.cautions:
        lines.append(f"caution: {caution}")
    lines.append(f"wrote {result.summary_path}" + (f" and {result.figure_path}" if result.figure_path else "")
                 + f" ({result.wall_seconds:.1f} s)")
    return lines
