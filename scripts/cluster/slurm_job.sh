#!/bin/bash
# kindyn sweep on Slurm WITHOUT dask-jobqueue: one batch job starts a Dask scheduler and workers
# itself (`dask scheduler` / `dask worker`) and runs `kindyn sweep --scheduler` against them.
# EXAMPLE, not run by the tests: adapt the #SBATCH lines, the environment set-up and the paths.
#
#   sbatch --export=ALL,CASE=cases/sweep-abc-rm.toml,OUT=/scratch/$USER/abc-rm scripts/cluster/slurm_job.sh
#
# The output folder must be on a file system that every node sees (workers write the point files).
# If the job hits its time limit, submit it again: finished points are reused, at most the points
# in flight are lost (and those resume from their checkpoints if they were old enough to have one).
#SBATCH --job-name=kindyn-sweep
#SBATCH --nodes=2
#SBATCH --ntasks-per-node=1
#SBATCH --cpus-per-task=32
#SBATCH --time=04:00:00
set -euo pipefail

CASE=${CASE:?set CASE to the case file}
OUT=${OUT:-$PWD/kindyn-output}
THREADS=${THREADS:-1}                                  # cores (FFT threads) per point
WORKERS_PER_NODE=$(( SLURM_CPUS_PER_TASK / THREADS ))   # workers x threads = cores of a node
SCHEDULER_FILE="$OUT/dask-scheduler-$SLURM_JOB_ID.json"

# module load python/3.11; source ~/venvs/kindyn/bin/activate    # <- your environment here
export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1
mkdir -p "$OUT"

# 1. the scheduler, on this (the first) node; it writes its address into the scheduler file
dask scheduler --scheduler-file "$SCHEDULER_FILE" --no-dashboard &
SCHEDULER_PID=$!
for _ in $(seq 60); do [ -s "$SCHEDULER_FILE" ] && break; sleep 1; done

# 2. one `dask worker` launcher per node, each with WORKERS_PER_NODE single-threaded worker processes
srun --nodes="$SLURM_JOB_NUM_NODES" --ntasks-per-node=1 --cpus-per-task="$SLURM_CPUS_PER_TASK" \
    dask worker --scheduler-file "$SCHEDULER_FILE" --nworkers "$WORKERS_PER_NODE" --nthreads 1 \
    --memory-limit 0 --local-directory "${TMPDIR:-/tmp}" &
WORKERS_PID=$!

# 3. the sweep itself (a light process: it only submits points and writes the summary)
kindyn sweep "$CASE" --out "$OUT" --scheduler "$SCHEDULER_FILE" --threads-per-run "$THREADS" --refine \
    && STATUS=0 || STATUS=$?

kill "$WORKERS_PID" "$SCHEDULER_PID" 2>/dev/null || true
exit $STATUS
