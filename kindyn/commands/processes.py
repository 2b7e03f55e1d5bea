"""The command line on several MPI processes (``mpiexec -n P kindyn run ...``, ``srun kindyn ...``).

Every process runs the same command (the computation is collective); only the first process prints
and writes files. The others send their standard output nowhere and keep their standard error in a
file of their own, shown only if that process fails on its own. Errors that every process meets
(a bad case file, a numerical failure, an error in a flow on one block, which the layout raises on
all) end every process with the same exit code and one message, from the first process. Any other
failure ends the whole job at once (``MPI_Abort`` with the exit code), so that no process waits
forever in a collective. Commands that do not run distributed refuse before any computation.
"""

from __future__ import annotations

import os
import sys
import tempfile

DISTRIBUTED_COMMANDS = ("run", "testfield")
RANK_VARIABLES = ("PMI_RANK", "PMIX_RANK", "OMPI_COMM_WORLD_RANK")


def launched_rank(environ=None) -> int:
    """This process's rank, from the launcher's environment (0 when not launched by MPI)."""
    environ = os.environ if environ is None else environ
    for name in RANK_VARIABLES:
        value = environ.get(name, "")
        if value.strip().isdigit():
            return int(value)
    return 0


def _command(argv) -> str | None:
    for word in argv:
        if not word.startswith("-"):
            return word
    return None


def main_on_processes(main, argv, processes: int) -> int:
    """Run ``main(argv)`` on this process of ``processes`` (see module docstring)."""
    argv = list(sys.argv[1:] if argv is None else argv)
    rank = launched_rank()
    command = _command(argv)
    if command is not None and command not in DISTRIBUTED_COMMANDS:
        if rank == 0:
            print(f"kindyn {command}: error: runs in one process, not on {processes} MPI processes (launch it "
                  f"without mpiexec/srun; {', '.join(DISTRIBUTED_COMMANDS)} run distributed)", file=sys.stderr)
        return 2
    saved_stderr, log = None, None
    if rank != 0:
        sys.stdout.flush()
        sys.stderr.flush()
        saved_stderr = os.dup(2)
        log = tempfile.TemporaryFile(mode="w+")
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, 1)
        os.dup2(log.fileno(), 2)
        os.close(devnull)
    code = main(argv)
    if code in (0, 2, 130):  # done; bad input (met by every process alike); interrupted
        return code
    # a numerical failure (every process meets it: the first has said so) or a failure of this
    # process alone (say it, from whichever process): end the whole job now
    if rank != 0 and log is not None:
        sys.stderr.flush()
        log.seek(0)
        text = log.read()
        if "numerical failure" not in text:
            os.write(saved_stderr, text.encode())
    from kindyn.transforms.distributed import Communicator

    Communicator().abort(code)
    return code
