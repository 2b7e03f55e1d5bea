"""How many processes this run was launched on, read from the launcher's environment.

MPI launchers tell each process the size of the job in the environment before MPI starts:
``PMI_SIZE`` (MPICH's Hydra ``mpiexec``, Intel MPI, Slurm's ``srun --mpi=pmi2``), ``PMIX_SIZE``
(PMIx launchers), ``OMPI_COMM_WORLD_SIZE`` (Open MPI), ``MPI_LOCALNRANKS`` is not used (local
only). Reading them lets kindyn decide whether to start MPI at all without importing mpi4py: a
serial run never loads it.
"""

from __future__ import annotations

import os

SIZE_VARIABLES = ("PMI_SIZE", "PMIX_SIZE", "OMPI_COMM_WORLD_SIZE")


def launched_processes(environ=None) -> int:
    """The number of processes of the MPI job this process belongs to (1 when not launched by MPI)."""
    environ = os.environ if environ is None else environ
    for name in SIZE_VARIABLES:
        value = environ.get(name, "")
        if value.strip().isdigit() and int(value) >= 1:
            return int(value)
    return 1
