"""Running points on a Dask distributed cluster (the only module of kindyn that imports dask).

``kindyn sweep CASE.toml --scheduler ADDRESS`` connects a :class:`distributed.Client` to an existing
scheduler: ``ADDRESS`` is its address (``tcp://host:8786``) or the path of a scheduler file written
by ``dask scheduler --scheduler-file FILE``. Every point is one task calling
:func:`kindyn.sweep.execution.run_point`; workers need kindyn installed and must see the output
folder (a shared file system), because each worker writes its own point files. The case text travels
with the task, so workers need not see the case file (a flow read from a file must be visible,
though). Start workers with one thread per run (``dask worker ADDRESS --nthreads 1 --nworkers N``)
or give ``--threads-per-run T`` and ``--nthreads 1`` workers with T cores each: Dask does not know
how many cores a run uses. ``kindyn sweep CASE.toml --cluster slurm`` starts the scheduler itself
and its workers as batch jobs (:mod:`kindyn.sweep.jobqueue`), through :meth:`DaskPool.run_on`.

The cluster is not ours: the client is closed at the end, the scheduler and workers keep running.

Before any connection the address is checked (:func:`check_scheduler_address`): ``host:port`` or
``PROTOCOL://host:port`` (tcp, tls, ws, wss, ucx; a port from 1 to 65535), ``inproc://...``, or an
existing scheduler file (a JSON object whose ``address`` is such an address). A scheduler that does
not answer within :data:`CONNECT_TIMEOUT` seconds is one :class:`~kindyn.errors.ParameterError`
line (exit code 2), never a hang. ``--threads-per-run`` is checked against the cores of the
workers once connected (the least of them: a point may run on any worker).
"""

from __future__ import annotations

import json
import re
import stat
import time
import uuid
from pathlib import Path

from kindyn.errors import ParameterError
from kindyn.sweep.execution import failed_record, read_record, run_point

CONNECT_TIMEOUT = 30.0
POLL_SECONDS = 0.25  # how often a run checks its futures and its workers
RESULT_TIMEOUT = 20.0  # fetching a finished point's record from its worker
PROTOCOLS = ("tcp", "tls", "ws", "wss", "ucx", "inproc")
_HOST_PORT = re.compile(r"^(?:\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9._-]+):(\d{1,5})$")
MAX_SCHEDULER_FILE = 2**20
EXPECTED = ("the address of a running Dask scheduler (tcp://host:8786, host:8786) or the path of its "
            "scheduler file (dask scheduler --scheduler-file FILE)")


def _check_address(address: str, shown: str) -> str:
    """``address`` if it is a scheduler address (see module docstring), else a ParameterError."""
    if not isinstance(address, str) or not address or len(address) > 1000 or any(c.isspace() for c in address):
        raise ParameterError("--scheduler", shown, EXPECTED)
    protocol, sep, rest = address.partition("://")
    if not sep:
        protocol, rest = "tcp", address
    if protocol not in PROTOCOLS:
        raise ParameterError("--scheduler", shown, f"{EXPECTED}; protocols: " + ", ".join(PROTOCOLS))
    if protocol == "inproc":
        if not rest:
            raise ParameterError("--scheduler", shown, EXPECTED)
        return address
    match = _HOST_PORT.match(rest)
    if not match or not 1 <= int(match.group(1)) <= 65535:
        raise ParameterError("--scheduler", shown, f"{EXPECTED}: host:port with a port from 1 to 65535")
    return address


def check_scheduler_address(address: str) -> dict:
    """``{"address": ...}`` or ``{"scheduler_file": ...}`` for :class:`distributed.Client`, after
    checking ``address`` (see module docstring); raises ParameterError naming ``--scheduler``."""
    path = Path(address) if isinstance(address, str) and address and "\x00" not in address else None
    try:
        info = path.stat() if path is not None and "://" not in address else None
    except (OSError, ValueError):
        info = None
    if info is not None:
        if not stat.S_ISREG(info.st_mode) or info.st_size > MAX_SCHEDULER_FILE:
            raise ParameterError("--scheduler", address, "a scheduler file (a small JSON file), not a folder or device")
        try:
            content = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, ValueError, RecursionError):
            content = None
        if not isinstance(content, dict) or not isinstance(content.get("address"), str):
            raise ParameterError("--scheduler", address,
                                 'a scheduler file: a JSON object with the scheduler\'s "address" '
                                 "(as written by dask scheduler --scheduler-file)")
        _check_address(content["address"], f"{address} (address {content['address']})")
        return {"scheduler_file": str(path)}
    if isinstance(address, str) and "://" not in address and ("/" in address or address.endswith(".json")):
        raise ParameterError("--scheduler", address, f"{EXPECTED} (no such file)")
    return {"address": _check_address(address, address)}


def _import_distributed():
    try:
        import distributed
    except ImportError:
        raise ParameterError("--scheduler", "", "the optional Dask support: pip install \"kindyn[cluster]\"") from None
    return distributed


class DaskPool:
    """Points as Dask tasks on the cluster behind ``address`` (see module docstring)."""

    def __init__(self, address: str, connect_timeout: float | None = None):
        self.address = address
        self.connect_timeout = CONNECT_TIMEOUT if connect_timeout is None else connect_timeout
        self.parallelism = 1  # learnt from the cluster (worker threads) once connected

    def _client(self, distributed):
        target = check_scheduler_address(self.address)
        kwargs = {"timeout": self.connect_timeout, "set_as_default": False}
        try:
            return distributed.Client(**target, **kwargs)
        except Exception as exc:  # noqa: BLE001 -- OSError, TimeoutError, a refused handshake: one line
            reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise ParameterError("--scheduler", self.address,
                                 f"a running Dask scheduler that answers within {self.connect_timeout:g} s "
                                 f"({reason})") from None

    @staticmethod
    def check_threads(client, tasks) -> None:
        """Every task's threads at most the cores of the smallest worker (see module docstring)."""
        from kindyn.case.budget import usable_cores

        threads = max((int(task.get("threads") or 1) for task in tasks), default=1)
        if threads <= 1:
            return
        try:
            cores = client.run(usable_cores)
        except Exception:  # noqa: BLE001 -- workers that cannot say: Dask's own limits apply
            return
        if cores and threads > min(cores.values()):
            raise ParameterError("--threads-per-run", threads,
                                 f"at most the cores of the cluster's smallest worker ({min(cores.values())}); "
                                 "more threads than cores only slow each run down")

    def describe(self) -> str:
        return f"on the Dask scheduler {self.address}"

    def run(self, tasks, on_result) -> None:
        """Submit every task; call ``on_result(task, record)`` here as each finishes."""
        distributed = _import_distributed()
        tasks = list(tasks)
        if not tasks:
            return
        with self._client(distributed) as client:
            self.run_on(client, tasks, on_result)

    @staticmethod
    def fetch(future, task) -> dict:
        """The record of a finished task. Its result lives on the worker, which may be gone (its job
        cancelled) before it is fetched: then the record the worker wrote next to the point is used."""
        try:
            return future.result(timeout=RESULT_TIMEOUT)
        except Exception as exc:  # noqa: BLE001 -- e.g. KilledWorker, a vanished worker: record it, go on
            record = read_record(task["out_dir"], task["identity"])
            if record is not None:
                return record
            return failed_record(task, f"{type(exc).__name__} on the Dask cluster: {exc}".strip())

    def run_on(self, client, tasks, on_result, lost_timeout: float | None = None) -> None:
        """Run ``tasks`` through ``client``. With ``lost_timeout``, a cluster without any worker for
        that many seconds (its jobs cancelled or past their walltime) ends the run: the points still
        unfinished get a failed record saying so (their files are not written, so the same command
        runs them again), instead of waiting for workers that will not come; a point whose worker
        wrote its record before it went counts as finished."""
        self.check_threads(client, tasks)
        self.parallelism = max(1, sum(client.nthreads().values()))
        futures = {}
        for task in tasks:
            key = f"kindyn-point-{task['identity']}-{uuid.uuid4().hex[:8]}"
            future = client.submit(run_point, task, pure=False, key=key)
            futures[future] = task
        pending, no_worker_since = set(futures), None
        while pending:
            done = {future for future in pending if future.done()}
            pending -= done
            if not done:
                time.sleep(POLL_SECONDS)
            for future in done:
                task = futures[future]
                on_result(task, self.fetch(future, task))
            if not pending or lost_timeout is None:
                continue
            try:
                workers = len(client.nthreads())
            except Exception:  # noqa: BLE001 -- the scheduler is ours and local; count as none
                workers = 0
            if workers:
                no_worker_since = None
                continue
            no_worker_since = no_worker_since or time.monotonic()
            if time.monotonic() - no_worker_since >= lost_timeout:
                message = (f"lost: no Dask worker left for {lost_timeout:g} s (worker jobs cancelled or past their "
                           "walltime); run the same command again to finish this point")
                for future in pending:  # a worker may have written its point's record just before it went
                    future.cancel()
                    task = futures[future]
                    on_result(task, read_record(task["out_dir"], task["identity"]) or failed_record(task, message))
                return
