"""``kindyn sweep CASE.toml``: growth rate at every point of a sweep, critical values, dynamo windows.

Points run in local worker processes (default: as many as fit, workers x threads-per-run <= cores)
or on a Dask distributed cluster (``--scheduler ADDRESS``), or on Dask workers submitted as Slurm or
PBS jobs (``--cluster slurm``, the case's ``[cluster]`` section, :mod:`kindyn.sweep.jobqueue`). Re-running the same command reuses
every finished point (identified by the content of its resolved case) and runs the rest.

The results (critical values with their uncertainties, dynamo windows, resolution studies, cautions,
files written) go to stdout; per-point progress to stderr. A sign change whose sign is not certain
at one end of its bracket (``|gamma| <= error``) is printed as "may turn positive/negative" with
the bracket's growth rates, and listed among the cautions.

The figure (``NAME-sweep.<format>``, the case's ``[output]`` figure keys or ``--figure-format``,
``--figure-size``, ``--figure-dpi``) is drawn here from the sweep's rows (:func:`draw_sweep_figure`):
growth rate versus the critical key, the dynamo windows shaded per line (grid), a zoom on every sign
change. The figure options never enter the points' cases, so changing them reruns nothing.
"""

from __future__ import annotations

from pathlib import Path

from kindyn.commands.common import (Reporter, add_case_arguments, add_figure_arguments, add_quiet_argument, clean_number,
                                    command_environment, figure_overrides, results_kept, with_error)
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
    parser.add_argument("--cluster", default=None, choices=("slurm", "pbs"),
                        help="run the points on Dask workers submitted as Slurm or PBS jobs (the case's [cluster] "
                             "section; needs the cluster extra)")
    parser.add_argument("--refine", action="store_true",
                        help="refine every sign change of gamma by bracketing runs ([sweep] refine_runs, refine_width)")
    parser.add_argument("--grids", default=None, metavar="LIST",
                        help='resolution study: also sweep domain.grid over e.g. "16,24,32" or "16x16x32,24x24x48"')
    parser.add_argument("--no-figure", action="store_true", help="do not write the sweep figure")
    add_quiet_argument(parser)
    add_figure_arguments(parser)


def figure_settings(path, overrides=(), figure_options=()) -> tuple[object, str]:
    """``(output section, flow type)`` of the sweep's case file with the overrides (and the figure
    options, which only the figure sees)."""
    from kindyn.case.load import apply_overrides, read_toml
    from kindyn.case.schema import OutputConfig, build_section

    _, data = read_toml(path)
    data = apply_overrides(apply_overrides(data, overrides), figure_options)
    output = build_section(OutputConfig, data.get("output", {}), "output", str(path))
    flow = data.get("flow", {})
    return output, str(flow.get("type", "")) if isinstance(flow, dict) else ""


def draw_sweep_figure(result, output, flow_type: str, path=None):
    """Draw the figure of a finished sweep (``result``: a :class:`kindyn.sweep.driver.SweepResult`)
    in the style of ``output``; returns its path."""
    from kindyn.output.figures import FigureStyle
    from kindyn.output.figures_sweep import curves_from_rows, key_label, sweep_figure

    style = FigureStyle.from_output(output)
    stem = result.summary_path.stem
    name = stem[: -len("-sweep")] if stem.endswith("-sweep") else stem
    path = path or result.summary_path.with_name(f"{name}-sweep.{style.format}")
    spec, key = result.spec, result.spec.critical
    curves = curves_from_rows(result.rows, key)
    if key:
        ticks, xlabel = None, key_label(key)
    else:
        ticks = ["\n".join(_value_text(v) for v in r["values"].values()) for r in result.rows]
        xlabel = ", ".join(spec.keys)
    title = f"{name}: {flow_type} flow, growth rate versus {key or xlabel}"
    sweep_figure(path, curves, result.critical, xlabel, title, log_x=bool(key and key in spec.log_spaced),
                 tick_labels=ticks, windows=result.windows, style=style)
    return path


def execute(args) -> int:
    report = Reporter("sweep", args)
    from kindyn.sweep.driver import SweepOptions, run_sweep
    from kindyn.sweep.resolution import parse_grids

    if args.threads_per_run is not None and args.threads_per_run < 1:
        raise ParameterError("--threads-per-run", args.threads_per_run, "a whole number >= 1")
    if args.workers is not None and args.scheduler:
        raise ParameterError("--workers", args.workers, "no --workers with --scheduler (the cluster has its workers)")
    if args.cluster and (args.scheduler or args.workers is not None):
        raise ParameterError("--cluster", args.cluster, "no --scheduler or --workers with --cluster (it starts both)")
    options = SweepOptions(out=Path(args.out), workers=args.workers, threads=args.threads_per_run,
                           scheduler=args.scheduler, cluster=args.cluster, refine=True if args.refine else None,
                           grids=parse_grids(args.grids) if args.grids else None,
                           figure=False, say=report.progress_callback)
    points = Path(args.out) / "points"  # if a file cannot be written, the finished points are kept there
    with results_kept(lambda: {"points": str(points)}, f"; the finished points are kept in {points} and a "
                      "second run with the same --out reuses them"):
        with command_environment(report.command_line):  # the summary and every point record the command
            result = run_sweep(args.case, args.overrides, options)
        output, flow_type = figure_settings(args.case, args.overrides, figure_overrides(args))
        if output.figure and not args.no_figure:
            result.figure_path = draw_sweep_figure(result, output, flow_type)
    for line in report_lines(result, cautions=False):
        report.result(line)
    for caution in all_cautions(result):
        report.caution(caution)
    report.result(written_line(result))
    report.finish(json_report(result))
    return 0


def json_report(result) -> dict:
    points = []
    for row in result.rows:
        entry = dict(row["values"])
        entry.update({k: (clean_number(row[k]) if isinstance(row.get(k), float) else row.get(k))
                      for k in ("growth_rate", "growth_rate_error", "growth_rate_error_this_grid", "frequency",
                                "converged", "status", "message", "Rm", "resolution_warning", "wall_seconds")})
        entry.update({"output": row["output"], "identity": row["identity"], "reused": row["reused"],
                      "refinement": row["refinement"]})
        points.append(entry)
    return {"summary": str(result.summary_path), "figure": str(result.figure_path) if result.figure_path else None,
            "keys": list(result.spec.keys), "critical_key": result.spec.critical, "points": points,
            "critical": [_finite_dict(c) for c in result.critical], "windows": result.windows,
            "resolution": result.resolution, "cautions": all_cautions(result), "wall_seconds": result.wall_seconds}


def _finite_dict(c: dict) -> dict:
    return {k: (clean_number(v) if isinstance(v, float) else v) for k, v in c.items()}


def _end(end: dict) -> str:
    text = f"{end['value']:.5g} +- {end['uncertainty']:.2g}"
    return text if end.get("sign_certain", True) else text + " (sign uncertain)"


def _uncertain_reason(c: dict) -> str:
    (x0, x1), (g0, g1), (s0, s1) = c["bracket"], c["growth_rates"], c["errors"]
    ends = [f"{x:.5g}: gamma = {with_error(g, s, sign=True)}" for x, g, s in ((x0, g0, s0), (x1, g1, s1))
            if not abs(g) > s]
    return "sign uncertain: |gamma| <= its error at " + "; ".join(ends)


def uncertain_cautions(result) -> list[str]:
    key = result.spec.critical
    out = []
    for c in result.critical:
        if not c["sign_certain"]:
            where = ", ".join(f"{k} = {v}" for k, v in c["line"].items())
            out.append(f"the sign change of gamma near {key} = {c['value']:.5g} (between {c['bracket'][0]:.5g} and "
                       f"{c['bracket'][1]:.5g}{', ' + where if where else ''}) is not certain ({_uncertain_reason(c)}): "
                       "tighten run.tolerance or add points there")
    return out


def all_cautions(result) -> list[str]:
    return list(result.cautions) + uncertain_cautions(result)


def written_line(result) -> str:
    return (f"wrote {result.summary_path}" + (f" and {result.figure_path}" if result.figure_path else "")
            + f" ({result.wall_seconds:.1f} s)")


def point_line(row: dict) -> str:
    """One point of the sweep: its swept values, gamma +- error, status (and a resolution flag)."""
    label = ", ".join(f"{k} = {_value_text(v)}" for k, v in row["values"].items())
    status = row.get("status")
    if status == "failed":
        return f"  {label}: FAILED: {row.get('message')}"
    g, e = row.get("growth_rate"), row.get("growth_rate_error")
    if g is None or (isinstance(g, float) and g != g):
        text = "gamma = n/a"
    elif e is None or (isinstance(e, float) and not e < float("inf")):
        text = f"gamma = {g:+.5g} (no error estimate yet)"
    else:
        text = f"gamma = {with_error(g, e, sign=True)}"
    omega = row.get("frequency")
    if omega is not None and omega == omega:
        text += f", omega = {omega:.5g}"
    flags = [status or "pending"] + (["possibly under-resolved"] if row.get("resolution_warning") else []) + \
        (["reused"] if row.get("reused") else []) + (["refinement"] if row.get("refinement") else [])
    return f"  {label}: {text} ({', '.join(flags)})"


def _value_text(value) -> str:
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, (list, tuple)):
        return "x".join(map(str, value)) if all(isinstance(v, int) for v in value) else str(list(value))
    return str(value)


def report_lines(result, cautions: bool = True) -> list[str]:
    """The text report: critical values, windows, resolution studies (and, with ``cautions``, the
    cautions and the files written)."""
    key = result.spec.critical
    lines = [point_line(row) for row in result.rows]
    for c in result.critical:
        where = ", ".join(f"{k} = {v}" for k, v in c["line"].items())
        turns = "turns positive" if c["direction"] == "opens" else "turns negative"
        if c["sign_certain"]:
            head = f"gamma {turns} at {key} = {c['value']:.5g} +- {c['uncertainty']:.2g}"
        else:
            head = f"gamma may {turns.replace('turns', 'turn')} near {key} = {c['value']:.5g} +- {c['uncertainty']:.2g}"
        tail = "" if c["sign_certain"] else f"; {_uncertain_reason(c)}"
        lines.append(head + f" (between {c['bracket'][0]:.5g} and {c['bracket'][1]:.5g}{tail})"
                     + (f" for {where}" if where else ""))
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
    if cautions:
        lines += [f"caution: {caution}" for caution in all_cautions(result)]
        lines.append(written_line(result))
    return lines
