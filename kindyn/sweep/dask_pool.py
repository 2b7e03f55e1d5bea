"""Running points on a Dask distributed cluster (the only module of kindyn that imports dask).

``kindyn sweep CASE.toml --scheduler ADDRESS`` connects a :class:`distributed.Client` to an existing
scheduler: ``ADDRESS`` is its address (``tcp://host:8786``) or the path of a scheduler file written
by ``dask scheduler --scheduler-file FILE``. Every point is one task calling
:func:`kindyn.sweep.execution.run_point`; workers need kindyn installed and must see the output
folder (a shared file system), because each worker writes its own point files. The case text travels
with the task, so workers need not see the case file (a flow read from a file must be visible,
though). Start workers with one thread per run (``dask worker ADDRESS --nthreads 1 --nworkers N``)
or give ``--threads-per-run T`` and ``--nthreads 1`` workers with T cores each: Dask does not know
how many cores a run uses. See ``scripts/cluster/`` for Slurm and PBS examples.

The cluster is not ours: the client is closed at the end, the scheduler and workers keep running.
"""

from __future__ import annotations

import uuid
from pathlib import Path

from kindyn.errors import ParameterError
from kindyn.sweep.execution import failed_record, run_point


def _import_distributed():
    try:
        import distributed
    except ImportError:
        raise ParameterError("--scheduler", "", "the optional Dask support: pip install \"kindyn[cluster]\"") from None
    return distributed


class DaskPool:
    """Points as Dask tasks on the cluster behind ``address`` (see module docstring)."""

    def __init__(self, address: str, connect_timeout: float = 30.0):
        self.address = address
        self.connect_timeout = connect_timeout
        self.parallelism = 1  # learnt from the cluster (worker threads) once connected

    def _client(self, distributed):
        kwargs = {"timeout": self.connect_timeout, "set_as_default": False}
        try:
            if Path(self.address).is_file():
                return distributed.Client(scheduler_file=self.address, **kwargs)
            return distributed.Client(self.address, **kwargs)
        except (OSError, TimeoutError) as exc:
            raise ParameterError("--scheduler", self.address,
                                 f"the address of a running Dask scheduler or its scheduler file ({exc})") from None

    def describe(self) -> str:
        return f"on the Dask scheduler {self.address}"

    def run(self, tasks, on_result) -> None:
        """Submit every task; call ``on_result(task, record)`` here as each finishes."""
        distributed = _import_distributed()
        tasks = list(tasks)
        if not tasks:
            return
        with self._client(distributed) as client:
            self.parallelism = max(1, sum(client.nthreads().values()))
            futures = {}
            for task in tasks:
                key = f"kindyn-point-{task['identity']}-{uuid.uuid4().hex[:8]}"
                future = client.submit(run_point, task, pure=False, key=key)
                futures[future] = task
            for future in distributed.as_completed(list(futures), loop=client.loop):
                task = futures[future]
                try:
                    record = future.result()
                except Exception as exc:  # noqa: BLE001 -- e.g. KilledWorker: record it, go on
                    record = failed_record(task, f"{type(exc).__name__} on the Dask cluster: {exc}")
                on_result(task, record)
