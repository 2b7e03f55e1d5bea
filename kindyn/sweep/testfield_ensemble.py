"""Test-field ensembles through the sweep machinery: one point per realisation of a random flow.

Realisation ``r`` of a case is the point with the overrides ``flow.seed = s + r`` and
``testfield.realisations = 1`` (``s`` the case's seed), identified by its content like every sweep
point (:func:`kindyn.sweep.points.resolve_point`, method ``"testfield"``). The points run in local
processes (:class:`~kindyn.sweep.execution.LocalPool`) or on a Dask cluster
(:class:`~kindyn.sweep.dask_pool.DaskPool`), each through :func:`kindyn.sweep.execution.run_point`,
which calls :func:`testfield_point` (registered as the sweep method ``"testfield"`` in
:data:`kindyn.sweep.methods.METHODS`, so ``[sweep] method = "testfield"`` also calibrates every point
of an ordinary sweep: the summary then has no growth rates, the point files hold the coefficients). Every point writes ``OUT/points/<identity>.nc`` (its own
test-field record) and ``<identity>.json`` (the record, with the tensors as nested lists); a
finished point is reused when the ensemble is run again (a larger N reuses the first ones).
:mod:`kindyn.testfield.ensemble` combines the records.
"""

from __future__ import annotations

from pathlib import Path

from kindyn.errors import NumericalError
from kindyn.sweep.execution import (STATUS_FAILED, LocalPool, check_local_layout, make_task, output_path,
                                    read_record)
from kindyn.sweep.points import resolve_point
from kindyn.testfield.summary import arrays_from_nested, nested

METHOD = "testfield"


def testfield_point(case, output: Path, checkpoint: Path) -> dict:
    """One realisation: :func:`kindyn.testfield.calibration.calibrate`, its netCDF record at ``output``,
    and a record with the tensors (the sweep's point keys have no growth rate: None)."""
    from kindyn.output.testfield_file import result_variables, write_testfield_file
    from kindyn.testfield.calibration import calibrate
    from kindyn.testfield.summary import file_attributes, summary_of

    result = calibrate(case)
    summary = summary_of(case, result)
    seed = getattr(case.flow, "seed", None)
    seed = int(seed) if isinstance(seed, int) and not isinstance(seed, bool) else None
    attributes = file_attributes(result, summary, result.notes)
    if seed is not None:
        attributes["flow_seed"] = seed
    write_testfield_file(output, case, summary, result_variables(result), attributes, result.K,
                         summary["mean_components"])
    resolution = summary["resolution"]  # both criteria of kindyn.testfield.resolution, JSON-plain
    return {
        "growth_rate": None, "growth_rate_error": None, "frequency": None,
        "resolution_warning": bool(resolution.get("resolution_warning", False)),
        "cutoff_ratio": resolution.get("cutoff_ratio"), "resolution": resolution,
        "converged": bool(result.converged), "stop_reason": result.stop_reason,
        "Rm": case.Rm, "flow_seed": seed, "method_detail": result.method,
        "solver_kind": str(result.solver.get("kind", "")),
        "tensors": {k: nested(v) for k, v in result.tensors.items()},
        "errors": {k: nested(v) for k, v in result.errors.items()},
        "full_set": {k: nested(v) for k, v in result.full_set.items()},
        "full_set_errors": {k: nested(v) for k, v in result.full_set_errors.items()},
        "notes": list(result.notes),
    }


def member_from_record(record: dict) -> dict:
    """The arrays of a finished point's record (for :func:`kindyn.testfield.ensemble.ensemble_result`)."""
    return {"tensors": arrays_from_nested(record["tensors"]), "errors": arrays_from_nested(record["errors"]),
            "full_set": arrays_from_nested(record["full_set"]),
            "full_set_errors": arrays_from_nested(record["full_set_errors"]),
            "converged": bool(record["converged"]), "stop_reason": record.get("stop_reason", ""),
            "notes": record.get("notes", []), "solver_kind": record.get("solver_kind", ""),
            "seed": record.get("flow_seed"), "output": record.get("output"),
            "resolution": record.get("resolution") or {}}


def run_ensemble(path, text: str, overrides, count: int, first_seed: int, out_dir, workers: int | None = None,
                 threads: int | None = None, scheduler: str | None = None, say=None) -> list[dict]:
    """Calibrate realisations ``first_seed .. first_seed + count - 1`` (module docstring); returns the
    members in seed order (see :func:`member_from_record`, plus ``seed`` and ``output`` path).

    Raises :class:`~kindyn.errors.NumericalError` when a realisation fails (its message)."""
    from kindyn.sweep.dask_pool import DaskPool

    say = say or (lambda line: None)
    seeds = [first_seed + r for r in range(count)]
    base = [*overrides, "testfield.realisations=1"]
    points = [resolve_point(path, text, {"flow.seed": seed}, base, METHOD) for seed in seeds]
    for p in points:
        if p.identity is None:
            raise NumericalError(f"a realisation's case is invalid: {p.error}")
    records, tasks = {}, []
    for p in points:
        done = read_record(out_dir, p.identity)
        if done is not None and "tensors" in done:
            records[p.identity] = done
        else:
            tasks.append(make_task(p, path, text, out_dir, METHOD, threads))
    if tasks:
        if scheduler:
            pool = DaskPool(scheduler)
        else:
            threads = threads or 1
            pool = LocalPool(min(check_local_layout(workers, threads), len(tasks)), threads)
        say(f"{len(tasks)} realisation(s) to calibrate {pool.describe()}"
            + (f", {len(records)} reused" if records else ""))

        def on_result(task, record):
            records[task["identity"]] = record
            say(f"  flow seed {task['values']['flow.seed']}: {record.get('status')}"
                + (f" ({record.get('message')})" if record.get("message") else ""))

        pool.run(tasks, on_result)
    members = []
    for seed, p in zip(seeds, points):
        record = records.get(p.identity) or {"status": STATUS_FAILED, "message": "no record"}
        if record.get("status") == STATUS_FAILED or "tensors" not in record:
            raise NumericalError(f"realisation with flow seed {seed} failed: {record.get('message', '')}")
        member = member_from_record(record)
        member["seed"], member["output"] = seed, str(output_path(out_dir, p.identity))
        members.append(member)
    return members
