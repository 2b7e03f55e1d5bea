"""A whole sweep: points -> runs (local processes or Dask) -> summary, critical values, figure.

Order of work:

1. read the case file, apply ``--set`` overrides, validate ``[sweep]`` (plus ``--grids``);
2. resolve and validate every listed point's case, computing nothing: an invalid swept value
   (``magnetic.Rm = -1``, a non-number) is a case error naming the swept key, raised before any
   point runs (:func:`refuse_invalid_points`); only points added later by refinement can still be
   recorded as failed;
3. reuse every point whose record ``OUT/points/<identity>.json`` names a complete netCDF file, run
   the others (at most the points in flight are lost if the sweep is killed);
4. after every finished point rewrite ``OUT/<name>-sweep.nc`` (the summary is always readable);
5. locate the sign changes of gamma along the critical key, and with ``refine`` add bracketing runs
   round by round until every sign change is narrow enough or its run budget is spent;
6. resolution study (when ``domain.grid`` is swept) and the figure.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from kindyn.case import load_case
from kindyn.case.load import apply_overrides, read_toml
from kindyn.errors import MISSING, CaseError, KindynError
from kindyn.output.atomic import check_output
from kindyn.sweep import critical as crit
from kindyn.sweep.execution import (STATUS_FAILED, STATUS_PENDING, LocalPool, check_local_layout, make_task,
                                    output_path, read_record)
from kindyn.sweep.points import format_value, resolve_point, resolve_points, unique_by_identity
from kindyn.sweep.resolution import resolution_study, with_grids
from kindyn.sweep.spec import validate_sweep
from kindyn.sweep.summary import write_summary

RECORD_KEYS = ("growth_rate", "growth_rate_error", "growth_rate_error_this_grid", "frequency", "converged", "status",
               "message", "Rm", "resolution_warning", "cutoff_ratio", "wall_seconds")


@dataclass
class SweepOptions:
    """How to run: output folder, local workers and threads per run, or a Dask scheduler address."""

    out: Path
    workers: int | None = None
    threads: int | None = None
    scheduler: str | None = None
    cluster: str | None = None  # "slurm" or "pbs": workers are batch jobs ([cluster] section)
    refine: bool | None = None  # None: as the [sweep] section says
    grids: list | None = None
    figure: bool | None = None  # None: as the case's output.figure says
    say: Callable[[str], None] | None = None


@dataclass
class SweepResult:
    spec: object
    rows: list
    critical: list
    windows: list
    resolution: list
    summary_path: Path
    figure_path: Path | None
    cautions: list = field(default_factory=list)
    wall_seconds: float = 0.0


def load_spec(path, overrides=(), grids=None):
    """``(spec, text)`` for the case file ``path`` (its [sweep] section, --set, --grids)."""
    text, data = read_toml(path)
    data = apply_overrides(data, overrides)
    spec = validate_sweep(data.get("sweep"), str(path))
    if grids:
        spec = with_grids(spec, grids, str(path))
    if not spec:
        raise CaseError(str(path), "sweep", MISSING,
                        'a [sweep] section with swept keys such as "magnetic.Rm" = [5, 10, 20] (or --grids)')
    return spec, text


class _Sweep:
    """The mutable state of one sweep (points, records, progress) behind :func:`run_sweep`."""

    def __init__(self, path, overrides, spec, text, options: SweepOptions):
        self.path, self.overrides, self.spec, self.text, self.options = str(path), tuple(overrides), spec, text, options
        self.out = Path(options.out)
        self.say = options.say or (lambda line: None)
        self.points, self.records, self.reused = [], {}, set()
        self.summary_path = self.out / "sweep.nc"  # renamed after the case once a point resolves
        self.started = time.time()

    # ---- points and records -------------------------------------------------------------------
    def add_points(self, new) -> list[int]:
        known = {p.identity for p in self.points if p.identity}
        added = []
        for p in unique_by_identity(new):
            if p.identity is not None and p.identity in known:
                continue
            self.points.append(p)
            added.append(len(self.points) - 1)
        return added

    def record(self, i) -> dict:
        p = self.points[i]
        if p.identity is None:
            return {"status": STATUS_FAILED, "message": p.error, "converged": False}
        return self.records.get(p.identity) or {"status": STATUS_PENDING, "converged": False}

    def rows(self) -> list[dict]:
        out = []
        for i in self.order():
            p, rec = self.points[i], self.record(i)
            row = {"values": p.values, "refinement": p.refinement, "identity": p.identity,
                   "reused": p.identity in self.reused,
                   "output": rec.get("output") and str(output_path(self.out, p.identity))}
            row.update({k: rec.get(k) for k in RECORD_KEYS})
            out.append(row)
        return out

    def order(self) -> list[int]:
        key = self.spec.critical
        if not key:
            return list(range(len(self.points)))
        lines = crit.group_lines([p.values for p in self.points], key)
        return [i for indices in lines.values() for i in sorted(indices, key=lambda j: self.points[j].values[key])]

    # ---- running ------------------------------------------------------------------------------
    def pool(self):
        if self.options.scheduler:
            from kindyn.sweep.dask_pool import DaskPool

            return DaskPool(self.options.scheduler)
        valid = [p.case for p in self.points if p.case is not None]
        if self.options.cluster:
            from kindyn.sweep.jobqueue import JobqueuePool

            config = valid[0].cluster
            if self.options.threads is None and config.threads_per_run is not None:
                self.options.threads = config.threads_per_run  # as --threads-per-run
            threads = self.options.threads or max(c.numerics.threads for c in valid)
            return JobqueuePool(self.options.cluster, config, threads, self.out)
        threads = self.options.threads or max(c.numerics.threads for c in valid)
        return LocalPool(check_local_layout(self.options.workers, threads), threads)

    def run(self, indices, pool) -> None:
        todo, reused = [], 0
        for i in indices:
            p = self.points[i]
            if p.identity is None:
                self.say(f"  point {p.label()}: invalid case, skipped: {p.error}")
                continue
            rec = read_record(self.out, p.identity)
            if rec is not None:
                self.records[p.identity] = rec
                self.reused.add(p.identity)
                reused += 1
            else:
                todo.append(p)
        self.write_summary()
        if not todo:
            if reused:
                self.say(f"sweep: {reused} point(s) reused from {self.out / 'points'}, none to run")
            return
        self.say(f"sweep: {len(todo)} point(s) to run {pool.describe()}" + (f", {reused} reused" if reused else ""))
        tasks = [make_task(p, self.path, self.text, self.out, self.spec.method, self.options.threads) for p in todo]
        labels = {p.identity: p.label() for p in todo}
        batch_start, done = time.time(), 0

        def on_result(task, record):
            nonlocal done
            done += 1
            self.records[task["identity"]] = record
            self.write_summary()
            elapsed = time.time() - batch_start
            eta = elapsed / done * (len(todo) - done)
            self.say(f"  [{done}/{len(todo)}] {labels[task['identity']]}: {_result_text(record)}"
                     f" | elapsed {_duration(elapsed)}, ETA {_duration(eta)}")

        pool.run(tasks, on_result)

    # ---- analysis -----------------------------------------------------------------------------
    def lines(self):
        """``[(line values, indices)]`` along the critical key (empty without one)."""
        key = self.spec.critical
        if not key:
            return []
        groups = crit.group_lines([p.values for p in self.points], key)
        return [(dict(others), indices) for others, indices in groups.items()]

    def line_data(self, indices):
        key = self.spec.critical
        x = [float(self.points[i].values[key]) for i in indices]
        recs = [self.record(i) for i in indices]
        gamma = [_number(r.get("growth_rate")) for r in recs]
        error = [_number(r.get("growth_rate_error"), math.inf) for r in recs]
        return x, gamma, error, [self.points[i].refinement for i in indices]

    def critical(self):
        found, windows = [], []
        for others, indices in self.lines():
            x, gamma, error, _ = self.line_data(indices)
            crossings = crit.sign_changes(x, gamma, error)
            found += [{**c.as_dict(), "key": self.spec.critical, "line": others} for c in crossings]
            windows += [{**w.as_dict(), "key": self.spec.critical, "line": others}
                        for w in crit.dynamo_windows(crossings, x, gamma)]
        return found, windows

    def refine(self, pool) -> None:
        spec = self.spec
        for _ in range(spec.refine_runs):  # every round spends at least one run of each active budget
            proposals = self.proposals(1)
            per_crossing = max(1, pool.parallelism // max(1, len(proposals)))
            if proposals and per_crossing > 1:
                proposals = self.proposals(per_crossing)
            if not proposals:
                return
            self.say(f"sweep: refining sign changes of gamma with {len(proposals)} run(s) at {spec.critical} = "
                     + ", ".join(format_value(p[spec.critical]) for p in proposals))
            new = [resolve_point(self.path, self.text, values, self.overrides, spec.method, refinement=True)
                   for values in proposals]
            self.run(self.add_points(new), pool)

    def proposals(self, per_crossing: int) -> list[dict]:
        """Swept values of the next refinement runs on every line (see :func:`critical.refinement_values`)."""
        spec, out = self.spec, []
        for _, indices in self.lines():
            x, gamma, error, flags = self.line_data(indices)
            template = self.points[indices[0]].values
            for v in crit.refinement_values(x, gamma, error, flags, spec.refine_runs, spec.refine_width, per_crossing):
                out.append({**template, spec.critical: v})
        return out

    def write_summary(self, final=False) -> None:
        critical, windows = self.critical()
        resolution = self.resolution()
        write_summary(self.summary_path, self.spec, self.rows(), critical, windows, resolution,
                      {"case_file": self.path, "case_overrides": list(self.overrides),
                       "complete": 1 if final else 0, "cautions": self.cautions(resolution)})

    def resolution(self):
        values = [self.points[i].values for i in range(len(self.points))]
        return resolution_study(values, [self.record(i) for i in range(len(self.points))])

    def cautions(self, resolution) -> list[str]:
        rows = [self.record(i) for i in range(len(self.points))]
        out = []
        warned = sum(1 for r in rows if r.get("resolution_warning"))
        if warned:
            out.append(f"{warned} point(s) may be under-resolved (resolution_warning): under-resolved runs can show "
                       "spurious growth; repeat on a finer grid")
        failed = sum(1 for r in rows if r.get("status") == STATUS_FAILED)
        if failed:
            out.append(f"{failed} point(s) failed; see status and message")
        unconverged = sum(1 for r in rows if r.get("status") == "unconverged")
        if unconverged:
            out.append(f"{unconverged} point(s) did not converge to the tolerance; their gamma carries its error")
        for entry in resolution:
            where = ", ".join(f"{k} = {format_value(v)}" for k, v in entry["fixed"].items())
            out += [f"resolution study{' (' + where + ')' if where else ''}: {c}" for c in entry["cautions"]]
        return out


def run_sweep(path, overrides=(), options: SweepOptions | None = None) -> SweepResult:
    """Run (or resume) the sweep of the case file ``path``; see the module docstring."""
    options = options or SweepOptions(Path("kindyn-output"))
    spec, text = load_spec(path, overrides, options.grids)
    if options.refine is not None:
        import dataclasses

        spec = dataclasses.replace(spec, refine=options.refine)
    sweep = _Sweep(path, overrides, spec, text, options)
    resolved = resolve_points(path, text, spec, overrides)
    refuse_invalid_points(path, text, spec, resolved)
    listed = sweep.add_points(resolved)
    valid = [p for p in sweep.points if p.case is not None]
    if not valid:
        load_case(path, sweep.points[0].overrides, text=text)  # raises the first point's error
        raise CaseError(str(path), "sweep", "", "at least one valid point")  # pragma: no cover
    base = valid[0].case
    pool = sweep.pool()  # checks --workers / --threads-per-run before anything is written
    longest = max((p.identity for p in valid), key=len)  # every name the sweep writes, before computing
    check_output(sweep.out, [f"{base.name}-sweep.nc", f"{base.name}-sweep.{base.output.figure_format}",
                             f"points/{longest}.nc", f"points/{longest}.json"], file=str(path),
                 key="output.name (or the case file's name)")
    sweep.summary_path = sweep.out / f"{base.name}-sweep.nc"
    sweep.say(f"kindyn sweep {path}: {len(listed)} point(s) over " + ", ".join(spec.keys)
              + f" ({spec.combine}), method {spec.method}")
    sweep.run(listed, pool)
    if spec.refine and spec.critical:
        sweep.refine(pool)
    elif spec.refine:
        sweep.say("sweep: nothing to refine: no numeric key along which gamma could change sign (sweep.critical)")
    sweep.write_summary(final=True)
    critical, windows = sweep.critical()
    resolution = sweep.resolution()
    figure_path = None
    want_figure = options.figure if options.figure is not None else base.output.figure
    if want_figure:
        figure_path = sweep.out / f"{base.name}-sweep.png"
        _figure(figure_path, sweep, critical, base)
    return SweepResult(spec, sweep.rows(), critical, windows, resolution, sweep.summary_path, figure_path,
                       sweep.cautions(resolution), time.time() - sweep.started)


def refuse_invalid_points(path, text, spec, points) -> None:
    """Raise the case error of the first listed point whose case does not validate (before anything runs).

    When the offending key is a swept key the error names it as the sweep's (``sweep."magnetic.Rm" =
    -1``, with its place in the list); otherwise (an error of the file or of ``--set``, or of a
    combination of values) the point's own error is raised, with the point named when it is not the
    same for every point.
    """
    for p in points:
        if p.case is not None:
            continue
        try:
            load_case(path, p.overrides, text=text)
        except CaseError as exc:
            if exc.key in p.values:
                value = p.values[exc.key]
                listed = spec.values[spec.keys.index(exc.key)]
                place = next((i for i, v in enumerate(listed) if v == value and type(v) is type(value)), None)
                where = f" (value {place + 1} of {len(listed)})" if place is not None else ""
                raise CaseError(str(path), f'sweep."{exc.key}"', value,
                                f"{exc.expected}: every swept value must be a valid {exc.key}{where}") from None
            if all(q.case is None for q in points):
                raise
            raise CaseError(str(path), "sweep", p.label(),
                            f"a valid case at every point; at {p.label()}: {exc}") from None
        except KindynError as exc:
            raise CaseError(str(path), "sweep", p.label(),
                            f"a valid case at every point; at {p.label()}: {exc}") from None
        raise CaseError(str(path), "sweep", p.label(), f"a valid case at every point: {p.error}")


def _figure(path, sweep, critical, base) -> None:
    from kindyn.output.figures_sweep import sweep_figure

    spec = sweep.spec
    key = spec.critical
    curves = []
    if key:
        for others, indices in sweep.lines():
            x, gamma, error, refined = sweep.line_data(indices)
            status = [sweep.record(i).get("status") for i in indices]
            warned = [bool(sweep.record(i).get("resolution_warning")) for i in indices]
            label = ", ".join(f"{k} = {format_value(v)}" for k, v in others.items())
            curves.append({"label": label, "x": x, "gamma": gamma, "error": error, "status": status,
                           "warning": warned, "refinement": refined})
        xlabel, ticks = key, None
    else:
        rows = sweep.rows()
        curves.append({"label": "", "x": list(range(len(rows))),
                       "gamma": [_number(r["growth_rate"]) for r in rows],
                       "error": [_number(r["growth_rate_error"], 0.0) for r in rows],
                       "status": [r["status"] for r in rows], "warning": [bool(r["resolution_warning"]) for r in rows]})
        xlabel = ", ".join(spec.keys)
        ticks = ["\n".join(format_value(v) for v in r["values"].values()) for r in rows]
    title = f"{base.name}: {base.flow_type} flow, growth rate versus {xlabel}"
    sweep_figure(path, curves, critical, xlabel, title, log_x=key in spec.log_spaced if key else False,
                 tick_labels=ticks)


def _number(value, default=math.nan) -> float:
    return default if value is None else float(value)


def _duration(seconds: float) -> str:
    seconds = max(0.0, seconds)
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.1f} min"
    return f"{seconds / 3600:.1f} h"


def _result_text(record) -> str:
    status = record.get("status")
    if status == STATUS_FAILED:
        return f"FAILED: {record.get('message')}"
    g, e = record.get("growth_rate"), record.get("growth_rate_error")
    text = "gamma = n/a" if g is None else f"gamma = {g:+.5g} +- {e if e is not None else math.inf:.2g}"
    if record.get("resolution_warning"):
        text += ", possibly under-resolved"
    return f"{text} ({status}, {record.get('wall_seconds', 0.0):.1f} s)"
