#!/bin/bash
# One kindyn run on several MPI processes as a Slurm batch job (README, "Runs across processes").
#
#   sbatch scripts/cluster/slurm_mpi_run.sh CASE.toml OUT
#
# Copy this file, set the partition, time and processes below and the site lines (modules, the
# venv where `pip install "kindyn[mpi]"` was run). The run writes OUT/NAME.nc and OUT/NAME.png and
# prints its one JSON object to OUT/NAME.json; a job that is cancelled or hits its time limit
# leaves a checkpoint in OUT, and submitting the same job again resumes it (on any number of
# processes). Tested against a real (one-node) Slurm cluster by tests/test_slurm.py.
#SBATCH --job-name=kindyn-run
#SBATCH --ntasks=2
#SBATCH --time=01:00:00
#SBATCH --partition=debug
#SBATCH --output=kindyn-run-%j.out
set -euo pipefail

# --- site set-up (edit) -------------------------------------------------------------------------
# module load gcc
# source "$HOME/venvs/kindyn/bin/activate"
export OMP_NUM_THREADS=1          # one thread per MPI process (numerics.threads = 1)

CASE=${1:?usage: sbatch slurm_mpi_run.sh CASE.toml OUT}
OUT=${2:-kindyn-output}
NAME=$(basename "$CASE" .toml)
mkdir -p "$OUT"
# srun starts the processes (PMI-2: the MPI runtime of `kindyn[mpi]` speaks it); on sites without
# it, `mpiexec -n "$SLURM_NTASKS"` inside the allocation does the same job.
LAUNCH=${KINDYN_LAUNCH:-srun --mpi=pmi2 -n "$SLURM_NTASKS"}
$LAUNCH python -m kindyn run "$CASE" --out "$OUT" --json --quiet > "$OUT/$NAME.json"
