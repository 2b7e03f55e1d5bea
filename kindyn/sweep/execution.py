"""Running points: the worker entry :func:`run_point` and the local process pool.

A *task* is a plain dict (picklable, small): the case file path and text, the ``--set`` overrides
of the run, the point's identity, the output folder, the method and the threads per run. The
worker loads the case itself, solves it with the method's runner, writes
``OUT/points/<identity>.nc`` and then the record ``OUT/points/<identity>.json`` (both atomically,
the record last, so a record always names a complete netCDF file), and returns the record.
A point that fails (invalid case, NaN, any exception) returns a record with ``status = "failed"``
and the message; it never stops the sweep.

Local execution uses :class:`concurrent.futures.ProcessPoolExecutor` with the ``forkserver``
start method (``spawn`` where there is none), at most ``workers`` points in flight, and
``workers x threads <= cores``. Workers exit by themselves when the sweep process dies (a watchdog
thread in each worker checks once a second that the sweep process still runs; the forkserver
would keep them alive otherwise), so a killed sweep leaves no orphans and loses at most the points
in flight (their checkpoints survive). The Dask path is in
:mod:`kindyn.sweep.dask_pool` and calls the same :func:`run_point`.
"""

from __future__ import annotations

import concurrent.futures as cf
import json
import multiprocessing
import os
import threading
import time
from collections import deque
from pathlib import Path

from kindyn.errors import KindynError, ParameterError
from kindyn.output.atomic import atomic_stream

STATUS_CONVERGED = "converged"
STATUS_UNCONVERGED = "unconverged"
STATUS_FAILED = "failed"
STATUS_PENDING = "pending"
FINISHED = (STATUS_CONVERGED, STATUS_UNCONVERGED)
WATCHDOG_SECONDS = 1.0


def available_cores() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover (not Linux)
        return os.cpu_count() or 1


def check_local_layout(workers: int | None, threads: int, cores: int | None = None) -> int:
    """Number of local workers: ``workers`` (default ``cores // threads``), with ``workers x threads <= cores``."""
    cores = cores or available_cores()
    if threads < 1:
        raise ParameterError("--threads-per-run", threads, "a whole number >= 1")
    if workers is None:
        return max(1, cores // threads)
    if workers < 1:
        raise ParameterError("--workers", workers, "a whole number >= 1")
    if workers * threads > cores:
        raise ParameterError("--workers", workers,
                             f"workers x threads-per-run <= {cores} cores (here {workers} x {threads}); "
                             "oversubscribed runs only slow each other down")
    return workers


def record_path(out_dir, identity: str) -> Path:
    return Path(out_dir) / "points" / f"{identity}.json"


def output_path(out_dir, identity: str) -> Path:
    return Path(out_dir) / "points" / f"{identity}.nc"


def write_json_atomic(path: Path, data: dict) -> None:
    text = json.dumps(data, allow_nan=False, default=str, indent=1)
    with atomic_stream(path, "w", encoding="utf-8") as stream:  # a new temporary, no link followed
        stream.write(text)


def read_record(out_dir, identity: str) -> dict | None:
    """The finished record of ``identity`` if it exists, is readable and names an existing netCDF file."""
    path = record_path(out_dir, identity)
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if record.get("identity") != identity or record.get("status") not in FINISHED:
        return None
    if not output_path(out_dir, identity).exists():
        return None
    return record


def make_task(point, path, text, out_dir, method: str, threads: int | None) -> dict:
    overrides = list(point.overrides)
    if threads is not None:
        overrides.append(f"numerics.threads={threads}")
    return {"path": str(path), "text": text, "overrides": overrides, "identity": point.identity,
            "out_dir": str(Path(out_dir).resolve()), "method": method, "threads": threads or 1,
            "values": point.values}


def _clean(x):
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    return x if x == x and abs(x) != float("inf") else None


def failed_record(task: dict, message: str, wall: float = 0.0) -> dict:
    return {"identity": task["identity"], "status": STATUS_FAILED, "message": message, "output": None,
            "growth_rate": None, "growth_rate_error": None, "frequency": None, "converged": False,
            "Rm": None, "resolution_warning": False, "cutoff_ratio": None, "wall_seconds": wall,
            "values": task.get("values", {}), "method": task["method"]}


def run_point(task: dict) -> dict:
    """Solve one point (in a worker); always returns a record, never raises for a failing point."""
    from threadpoolctl import threadpool_limits

    from kindyn.case import load_case
    from kindyn.sweep.methods import method_runner

    started = time.time()
    out_dir, identity = Path(task["out_dir"]), task["identity"]
    out = output_path(out_dir, identity)
    try:
        case = load_case(task["path"], task["overrides"], text=task["text"])
        with threadpool_limits(limits=task["threads"]):
            result = method_runner(task["method"])(case, out, out.with_name(f"{identity}.checkpoint.nc"))
    except KindynError as exc:
        record = failed_record(task, str(exc), time.time() - started)
    except Exception as exc:  # noqa: BLE001 -- a failing point is recorded and the sweep goes on
        record = failed_record(task, f"{type(exc).__name__}: {exc}", time.time() - started)
    else:
        record = {key: (_clean(v) if isinstance(v, float) else v) for key, v in result.items()}
        record.update({"identity": identity, "output": out.name, "method": task["method"],
                       "status": STATUS_CONVERGED if result.get("converged") else STATUS_UNCONVERGED,
                       "message": "" if result.get("converged") else str(result.get("stop_reason", "")),
                       "values": task.get("values", {}), "wall_seconds": time.time() - started})
    try:
        write_json_atomic(record_path(out_dir, identity), record)
    except OSError as exc:
        record = failed_record(task, f"could not write the point record: {exc}", time.time() - started)
    return record


def _process_alive(pid: int) -> bool:
    """Whether ``pid`` runs (a zombie counts as dead: on Linux its /proc state is "Z")."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    try:
        return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0] != "Z"
    except (OSError, IndexError):
        return True


def _watch_sweep(sweep_pid: int) -> None:
    """Worker initializer: exit when the sweep process is gone (its forkserver may outlive it)."""
    parent = os.getppid()

    def watch():
        while True:
            time.sleep(WATCHDOG_SECONDS)
            if os.getppid() != parent or not _process_alive(sweep_pid):
                os._exit(3)

    threading.Thread(target=watch, daemon=True, name="kindyn-sweep-watchdog").start()


def _start_method() -> str:
    return "forkserver" if "forkserver" in multiprocessing.get_all_start_methods() else "spawn"


class LocalPool:
    """Up to ``workers`` local processes, each running one point at a time."""

    def __init__(self, workers: int, threads: int = 1):
        self.workers, self.threads = workers, threads

    @property
    def parallelism(self) -> int:
        """How many points run at once."""
        return self.workers

    def describe(self) -> str:
        return f"on {self.workers} local worker(s) x {self.threads} thread(s)"

    def _executor(self):
        return cf.ProcessPoolExecutor(max_workers=self.workers, mp_context=multiprocessing.get_context(_start_method()),
                                      initializer=_watch_sweep, initargs=(os.getpid(),))

    def run(self, tasks, on_result) -> None:
        """Run ``tasks``; call ``on_result(task, record)`` in this process as each one finishes."""
        queue = deque(tasks)
        executor = self._executor()
        running = {}
        try:
            while queue or running:
                while queue and len(running) < self.workers:
                    task = queue.popleft()
                    running[executor.submit(run_point, task)] = task
                done, _ = cf.wait(running, return_when=cf.FIRST_COMPLETED)
                broken = False
                for future in done:
                    task = running.pop(future)
                    try:
                        record = future.result()
                    except cf.process.BrokenProcessPool:
                        broken = True
                        record = failed_record(task, "the worker process died (killed, or out of memory)")
                    except Exception as exc:  # noqa: BLE001
                        record = failed_record(task, f"{type(exc).__name__}: {exc}")
                    on_result(task, record)
                if broken:
                    # every point still in flight died with the pool: record them, start a fresh pool
                    for future, task in list(running.items()):
                        on_result(task, failed_record(task, "the worker process died (killed, or out of memory)"))
                    running.clear()
                    executor.shutdown(wait=False, cancel_futures=True)
                    executor = self._executor()
        finally:
            executor.shutdown(wait=True, cancel_futures=True)
