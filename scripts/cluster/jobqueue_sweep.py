"""Run a kindyn sweep on a Slurm or PBS cluster, with Dask workers started by dask-jobqueue.

EXAMPLE, not run by the tests: adapt queue, account, cores, memory, walltime and the prologue to
your site. Needs ``pip install "kindyn[cluster]" dask-jobqueue`` in an environment that the
compute nodes can see, and an output folder on a file system shared by all nodes (every worker
writes its own point files there).

What it does:

1. starts a Dask scheduler in this process (run it on a login node, or in a small long-lived job)
   and asks the batch system for ``--jobs`` worker jobs through ``SLURMCluster`` or ``PBSCluster``;
   each job runs ``cores / threads-per-run`` Dask worker processes with one Dask thread each, so
   that one point uses ``--threads-per-run`` cores and the node is not oversubscribed;
2. runs ``kindyn sweep CASE --scheduler ADDRESS --threads-per-run T --out OUT`` against it;
3. closes the cluster (cancels the worker jobs) when the sweep ends.

If the allocation ends early, run the same command again: finished points are reused.

Examples::

    python scripts/cluster/jobqueue_sweep.py --system slurm --case cases/sweep-abc-rm.toml \\
        --out /scratch/$USER/abc-rm --jobs 4 --cores 32 --memory 64GB --walltime 04:00:00 \\
        --queue compute --account myproject --refine

    python scripts/cluster/jobqueue_sweep.py --system pbs --case cases/sweep-abc-rm.toml \\
        --out /scratch/$USER/abc-rm --jobs 4 --cores 24 --memory 48GB --walltime 04:00:00 \\
        --queue workq --threads-per-run 2
"""

from __future__ import annotations

import argparse
import subprocess
import sys


def parse_args(argv=None):
    p = argparse.ArgumentParser(description="kindyn sweep on Slurm/PBS through dask-jobqueue (example)")
    p.add_argument("--system", choices=("slurm", "pbs"), required=True)
    p.add_argument("--case", required=True, help="case file with a [sweep] section")
    p.add_argument("--out", required=True, help="output folder on a shared file system")
    p.add_argument("--jobs", type=int, default=2, help="number of worker jobs (nodes) to request")
    p.add_argument("--cores", type=int, default=32, help="cores per job")
    p.add_argument("--memory", default="64GB", help="memory per job")
    p.add_argument("--walltime", default="04:00:00")
    p.add_argument("--queue", default=None, help="partition (Slurm) or queue (PBS)")
    p.add_argument("--account", default=None, help="project/account to charge")
    p.add_argument("--threads-per-run", type=int, default=1, help="cores (FFT threads) per point")
    p.add_argument("--interface", default=None, help="network interface of the scheduler, e.g. ib0")
    p.add_argument("--prologue", action="append", default=[],
                   help='shell line run before each worker starts, e.g. "module load python" (repeatable)')
    p.add_argument("--refine", action="store_true", help="refine sign changes of gamma (kindyn sweep --refine)")
    return p.parse_args(argv)


def make_cluster(args):
    import dask_jobqueue

    workers_per_job = max(1, args.cores // args.threads_per_run)
    prologue = ["export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1", *args.prologue]
    common = dict(
        cores=workers_per_job,            # Dask threads per job: one per worker process
        processes=workers_per_job,        # worker processes per job: one point each at a time
        memory=args.memory,
        walltime=args.walltime,
        queue=args.queue,
        account=args.account,
        job_script_prologue=prologue,
        interface=args.interface,
    )
    if args.system == "slurm":
        return dask_jobqueue.SLURMCluster(job_cpu=args.cores, **common)
    return dask_jobqueue.PBSCluster(resource_spec=f"select=1:ncpus={args.cores}:mem={args.memory}", **common)


def main(argv=None) -> int:
    args = parse_args(argv)
    cluster = make_cluster(args)
    try:
        print(cluster.job_script(), file=sys.stderr)  # what each worker job runs, for the record
        cluster.scale(jobs=args.jobs)
        command = ["kindyn", "sweep", args.case, "--out", args.out, "--scheduler", cluster.scheduler_address,
                   "--threads-per-run", str(args.threads_per_run)] + (["--refine"] if args.refine else [])
        print("running: " + " ".join(command), file=sys.stderr)
        return subprocess.call(command)
    finally:
        cluster.close()


if __name__ == "__main__":
    sys.exit(main())
