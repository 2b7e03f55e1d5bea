"""Sweeps whose Dask workers are batch jobs: ``kindyn sweep CASE.toml --cluster slurm`` (or ``pbs``).

:class:`JobqueuePool` starts a Dask scheduler in the sweep process, has dask-jobqueue (>= 0.9, the
``cluster`` extra) submit the ``[cluster]`` section's worker jobs (:mod:`kindyn.case.cluster_section`)
with ``sbatch`` or ``qsub``, runs the points through :meth:`kindyn.sweep.dask_pool.DaskPool.run_on`
and cancels the jobs at the end (``cluster.close()``). Run it where jobs can be submitted and
where the compute nodes can reach this process (a login node, or a small long-lived job); the output
folder must be on a file system all nodes see. Each job is
``cores // threads_per_run`` Dask worker processes with one thread each (``processes`` and Dask
``cores``), the whole job reserving ``cores`` CPUs (Slurm ``--cpus-per-task``, PBS ``ncpus``); the
workers use this Python (``sys.executable``) unless the prologue activates another environment.

What the scheduler can do to a sweep:

* a request that Slurm refuses (more memory or cores than a node has, an unknown partition) is
  found before any job is queued (``sbatch --test-only`` of the worker script): one
  :class:`~kindyn.errors.ParameterError` line with Slurm's reason;
* a job that is queued but does not start within ``start_timeout`` seconds is one error line with
  the job's state and reason (``squeue``), and the jobs are cancelled;
* a job cancelled (``scancel``) or past its walltime loses only the points it was running: the
  other jobs' workers take them over; when no worker is left for ``lost_timeout`` seconds the sweep
  ends, the unfinished points are recorded as failed ("lost ...", no point file) and the summary is
  written as always. Running the same command again reuses every finished point and runs the rest.

Every job's script is kept in ``OUT/cluster/worker-job.sh`` and the jobs' output in ``OUT/cluster/``.
"""

from __future__ import annotations

import logging
import shutil
import subprocess
import sys
import time
from pathlib import Path

from kindyn.errors import ParameterError
from kindyn.sweep.dask_pool import DaskPool, _import_distributed

SYSTEMS = ("slurm", "pbs")
POLL_SECONDS = 1.0


def _import_jobqueue():
    try:
        import dask_jobqueue
    except ImportError:
        raise ParameterError("--cluster", "", 'dask-jobqueue: pip install "kindyn[cluster]"') from None
    return dask_jobqueue


def cluster_arguments(system: str, config, threads: int, log_directory) -> dict:
    """Keyword arguments of ``SLURMCluster`` / ``PBSCluster`` for the ``[cluster]`` section ``config``
    and ``threads`` cores per point (see module docstring)."""
    if threads > config.cores:
        raise ParameterError("cluster.threads_per_run", threads,
                             f"at most cluster.cores ({config.cores}): one point runs inside one job")
    workers = max(1, config.cores // threads)
    prologue = [f"export OMP_NUM_THREADS={threads} OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1",
                *config.job_script_prologue]
    kwargs = dict(cores=workers, processes=workers, memory=config.memory, walltime=config.walltime,
                  queue=config.queue, account=config.account, job_script_prologue=prologue,
                  job_extra_directives=list(config.job_extra_directives),
                  worker_extra_args=list(config.worker_extra_args), interface=config.interface,
                  log_directory=str(log_directory), python=sys.executable, job_name="kindyn-sweep",
                  death_timeout=max(60, int(config.lost_timeout)))
    if system == "slurm":
        kwargs["job_cpu"] = config.cores
    else:
        kwargs["resource_spec"] = f"select=1:ncpus={config.cores}:mem={config.memory.replace(' ', '')}"
    return kwargs


class JobqueuePool(DaskPool):
    """Points on Dask workers that are Slurm or PBS jobs (see module docstring)."""

    def __init__(self, system: str, config, threads: int, out):
        if system not in SYSTEMS:
            raise ParameterError("--cluster", system, "slurm or pbs")
        super().__init__(address=system)
        self.system, self.config, self.threads = system, config, threads
        self.folder = Path(out).resolve() / "cluster"
        self.kwargs = cluster_arguments(system, config, threads, self.folder)
        self.parallelism = config.jobs * max(1, config.cores // threads)

    def describe(self) -> str:
        c = self.config
        return (f"on {c.jobs} {self.system} job(s) of {c.cores} core(s), {c.memory}, {c.walltime}"
                + (f" in {c.queue}" if c.queue else "") + f", {self.kwargs['processes']} point(s) per job at once")

    def make_cluster(self):
        jobqueue = _import_jobqueue()
        cls = jobqueue.SLURMCluster if self.system == "slurm" else jobqueue.PBSCluster
        self.folder.mkdir(parents=True, exist_ok=True)
        try:
            return cls(**self.kwargs)
        except (TypeError, ValueError) as exc:
            raise ParameterError("cluster", self.system, f"settings dask-jobqueue accepts ({exc})") from None

    def check_request(self, script: str) -> None:
        """Slurm's verdict on the job script before anything is queued (``sbatch --test-only``)."""
        if self.system != "slurm" or shutil.which("sbatch") is None:
            return
        path = self.folder / "worker-job.sh"
        done = subprocess.run(["sbatch", "--test-only", str(path)], capture_output=True, text=True, timeout=60)
        if done.returncode != 0:
            reason = " ".join((done.stderr or done.stdout).split()).replace("sbatch: error: ", "")
            raise ParameterError("cluster", self.request_text(),
                                 f"a request Slurm can satisfy (sbatch refused it: {reason or 'no reason given'})")

    def request_text(self) -> str:
        c = self.config
        return f"{c.jobs} job(s) x {c.cores} core(s), memory {c.memory}, walltime {c.walltime}" + (
            f", partition {c.queue}" if c.queue else "")

    def job_states(self, cluster) -> str:
        ids = [getattr(job, "job_id", None) for job in cluster.workers.values()]
        ids = [i for i in ids if i]
        if not ids:
            return "no job was queued (see " + str(self.folder) + ")"
        if self.system == "slurm" and shutil.which("squeue"):
            done = subprocess.run(["squeue", "-h", "-j", ",".join(ids), "-o", "%i %T %r"], capture_output=True,
                                  text=True, timeout=60)
            if done.returncode == 0 and done.stdout.strip():
                return "; ".join(line.strip() for line in done.stdout.strip().splitlines())
        return "jobs " + ", ".join(ids) + " (qstat / squeue shows why)"

    def wait_for_workers(self, client, cluster) -> None:
        timeout = self.config.start_timeout
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if client.nthreads():
                return
            time.sleep(POLL_SECONDS)
        states = self.job_states(cluster)
        raise ParameterError("cluster.start_timeout", timeout,
                             f"worker jobs that start within it: no worker started ({states}); "
                             "raise it for a busy queue or ask for less")

    def run(self, tasks, on_result) -> None:
        distributed = _import_distributed()
        tasks = list(tasks)
        if not tasks:
            return
        # dask-jobqueue logs a refused submission and retries; our checks say it in one line
        logging.getLogger("distributed.deploy.spec").setLevel(logging.CRITICAL)
        cluster = self.make_cluster()
        try:
            script = cluster.job_script()
            (self.folder / "worker-job.sh").write_text(script)
            self.check_request(script)
            self.address = cluster.scheduler_address
            cluster.scale(jobs=self.config.jobs)
            with distributed.Client(cluster, set_as_default=False) as client:
                self.wait_for_workers(client, cluster)
                self.run_on(client, tasks, on_result, lost_timeout=self.config.lost_timeout)
        finally:
            try:
                cluster.close(timeout=30)
            except Exception:  # noqa: BLE001 -- jobs already gone; the scheduler ends with this process
                pass
