"""The ``[cluster]`` case section: the batch jobs of a sweep run with ``kindyn sweep CASE --cluster slurm``.

The keys are read only when the sweep is asked to run on a batch system (``--cluster slurm`` or
``--cluster pbs``); ``kindyn sweep CASE`` runs the same case file in local processes and
``--scheduler ADDRESS`` on an existing Dask scheduler, both ignoring the section. The batch jobs
are Dask workers that dask-jobqueue (``pip install "kindyn[cluster]"``) submits through
``sbatch`` / ``qsub``; :mod:`kindyn.sweep.jobqueue` turns the section into a ``SLURMCluster`` or
``PBSCluster``. The key names are dask-jobqueue's (>= 0.9) where they mean the same thing::

    [cluster]
    jobs = 2                   # worker jobs (nodes or parts of nodes) to submit
    cores = 32                 # cores of each job (Slurm --cpus-per-task, PBS ncpus)
    memory = "64GB"            # memory of each job
    walltime = "04:00:00"      # of each job; a job past it loses only the points it was running
    queue = "compute"          # partition (Slurm) or queue (PBS)
    account = "myproject"      # project charged (optional)
    threads_per_run = 2        # cores of one point (default: --threads-per-run, else numerics.threads)
    job_script_prologue = ["module load python/3.11", "source $HOME/venvs/kindyn/bin/activate"]
    job_extra_directives = ["--constraint=skylake"]   # extra #SBATCH / #PBS lines (optional)
    worker_extra_args = []     # extra arguments of each Dask worker (optional)
    interface = "ib0"          # network interface of scheduler and workers (optional)
    start_timeout = 300        # seconds to wait for the first worker job to start, then one error line
    lost_timeout = 60          # seconds without any worker after which the unfinished points are left

Each job runs ``cores // threads_per_run`` worker processes with one Dask thread each, so a job
runs that many points at once and never oversubscribes its cores. The section describes where
points run, not what they compute, so it enters no point's identity (``as_dict() == {}``): a sweep
started locally can be finished on Slurm and the reverse.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, fields

from kindyn.case import schema
from kindyn.case.schema import SectionConfig, setting

SYSTEMS = ("slurm", "pbs")
MAX_JOBS = 10_000
MAX_TIMEOUT = 7 * 24 * 3600.0
_MEMORY = re.compile(r"^\s*\d+(\.\d+)?\s*([kKmMgGtT]i?[bB]?|[bB])\s*$")
_WALLTIME = re.compile(r"^(\d+-)?\d{1,3}(:\d{2}){0,2}$")


def memory(value) -> str:
    if not isinstance(value, str) or not _MEMORY.match(value):
        raise ValueError('a memory size with its unit, such as "4GB", "500MB" or "2GiB"')
    return value.strip()


def walltime(value) -> str:
    if not isinstance(value, str) or not _WALLTIME.match(value.strip()):
        raise ValueError('a walltime such as "04:00:00" (hours:minutes:seconds) or "1-12:00:00"')
    return value.strip()


def name(value) -> str:
    if not isinstance(value, str) or not value.strip() or any(c.isspace() for c in value) or len(value) > 200:
        raise ValueError("a name without spaces")
    return value


def timeout(value) -> float:
    value = schema.positive(value)
    if value > MAX_TIMEOUT:
        raise ValueError(f"a number of seconds, at most {MAX_TIMEOUT:g}")
    return value


_lines = schema.list_of(schema.string, "strings (one shell line or option each)")


def lines(value) -> tuple[str, ...]:
    if value == []:
        return ()
    result = _lines(value)
    if any("\n" in line for line in result):
        raise ValueError("a list of strings, one line each (no line breaks inside a string)")
    return result


@dataclass(frozen=True, kw_only=True)
class ClusterConfig(SectionConfig):
    """``[cluster]``: the worker jobs of ``kindyn sweep --cluster slurm|pbs`` (see module docstring)."""

    jobs: int = setting(schema.bounded_integer(1, MAX_JOBS), 1, "number of worker jobs to submit")
    cores: int = setting(schema.bounded_integer(1, 100_000), 1, "cores of each worker job")
    memory: str = setting(memory, "2GB", 'memory of each worker job, e.g. "64GB"')
    walltime: str = setting(walltime, "01:00:00", 'walltime of each worker job, e.g. "04:00:00"')
    queue: str | None = setting(name, None, "partition (Slurm) or queue (PBS); default: the site's default")
    account: str | None = setting(name, None, "account / project charged for the jobs")
    threads_per_run: int | None = setting(
        schema.bounded_integer(1, 100_000), None,
        "cores of one point (default: --threads-per-run, else the case's numerics.threads); at most cores")
    job_script_prologue: tuple[str, ...] = setting(
        lines, (), 'shell lines run before the worker starts, e.g. ["module load python", "source venv/bin/activate"]')
    job_extra_directives: tuple[str, ...] = setting(
        lines, (), 'extra scheduler options of each job, e.g. ["--constraint=skylake"] (#SBATCH / #PBS lines)')
    worker_extra_args: tuple[str, ...] = setting(lines, (), "extra command-line arguments of each Dask worker")
    interface: str | None = setting(name, None, 'network interface of the scheduler and workers, e.g. "ib0"')
    start_timeout: float = setting(
        timeout, 300.0, "seconds to wait for the first worker job to start before giving up with one error line")
    lost_timeout: float = setting(
        timeout, 60.0, "seconds without any worker after which the unfinished points are left for a rerun")

    def settings(self) -> dict:
        """The validated keys (``as_dict`` is empty: see module docstring)."""
        return {f.name: getattr(self, f.name) for f in fields(self)}

    def as_dict(self) -> dict:
        """Nothing: where points run does not enter their identity (see module docstring)."""
        return {}
