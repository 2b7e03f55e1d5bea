#!/bin/bash
# kindyn sweep on PBS Pro / OpenPBS WITHOUT dask-jobqueue: `dask scheduler` on the first node,
# `dask worker` on every node (started with pbsdsh), then `kindyn sweep --scheduler`.
# EXAMPLE, not run by the tests: adapt the #PBS lines, the environment set-up and the paths.
#
#   qsub -v CASE=cases/sweep-abc-rm.toml,OUT=/scratch/$USER/abc-rm scripts/cluster/pbs_job.sh
#
# The output folder must be on a shared file system. Re-submit to resume: finished points are reused.
#PBS -N kindyn-sweep
#PBS -l select=2:ncpus=24:mpiprocs=1
#PBS -l walltime=04:00:00
set -euo pipefail
cd "${PBS_O_WORKDIR:-$PWD}"

CASE=${CASE:?set CASE to the case file}
OUT=${OUT:-$PWD/kindyn-output}
THREADS=${THREADS:-1}
CORES=${NCPUS:-24}
WORKERS_PER_NODE=$(( CORES / THREADS ))
SCHEDULER_FILE="$OUT/dask-scheduler-${PBS_JOBID%%.*}.json"

# module load python/3.11; source ~/venvs/kindyn/bin/activate    # <- your environment here
export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1
mkdir -p "$OUT"

dask scheduler --scheduler-file "$SCHEDULER_FILE" --no-dashboard &
SCHEDULER_PID=$!
for _ in $(seq 60); do [ -s "$SCHEDULER_FILE" ] && break; sleep 1; done

# one worker launcher per node (pbsdsh -u: once per host); the command must find the same environment
pbsdsh -u -- bash -lc "cd '$PWD' && export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 && \
    dask worker --scheduler-file '$SCHEDULER_FILE' --nworkers $WORKERS_PER_NODE --nthreads 1 \
    --memory-limit 0 --local-directory \${TMPDIR:-/tmp}" &
WORKERS_PID=$!

kindyn sweep "$CASE" --out "$OUT" --scheduler "$SCHEDULER_FILE" --threads-per-run "$THREADS" --refine \
    && STATUS=0 || STATUS=$?

kill "$WORKERS_PID" "$SCHEDULER_PID" 2>/dev/null || true
exit $STATUS
