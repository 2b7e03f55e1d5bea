"""The ``kindyn`` command line: ``kindyn COMMAND CASE.toml [options]``.

Each command lives in :mod:`kindyn.commands` as a module with ``HELP``, ``add_arguments(parser)``
and ``execute(args) -> int``. Exit codes: 0 success (a run that stops unconverged included: its
output says so), 1 numerical failure (NaN/Inf, runaway; one line on stderr), 2 bad input (a case
file, ``--set`` or option; one line on stderr naming file, key, value and what is expected, before
any computation), 130 interrupted. Nothing else reaches the user as a traceback: out of memory
(beyond the case's estimate, :mod:`kindyn.case.budget`) and an internal error (a bug) are one line
and exit code 1 (``KINDYN_TRACEBACK=1`` shows an internal error's traceback); input nested too
deeply for the interpreter is one line and exit code 2. Options are checked before the case is read
(:func:`check_options`: counts, ``--threads-per-run`` against the cores, the ``--scheduler``
address), and the case is loaded for the command's purpose (:func:`case_purpose`: what the memory
estimate counts).

Results and cautions go to stdout, progress to stderr (:mod:`kindyn.commands.common`); with
``--json`` stdout is reserved for the one JSON object while the command runs.
"""

from __future__ import annotations

import argparse
import importlib
import os
import re
import sys

from kindyn import __version__
from kindyn.commands.common import stdout_reserved_for_json
from kindyn.errors import KindynError, NumericalError, ParameterError, WriteError, one_line
from kindyn.array_kernels import configure_openmp_wait

COMMANDS = ("run", "ensemble", "flow", "testfield", "closure", "sweep", "modes")
# what each command loads its case for (kindyn.case.budget.purpose: the memory estimate); closure
# calibrates test fields in the case box (its direct runs are in boxes no larger)
PURPOSES = {"run": "run", "ensemble": "run", "flow": "flow", "testfield": "testfield", "closure": "testfield",
            "sweep": "sweep", "modes": "modes"}
_ON_PROCESSES: list = []  # set once main() has been entered through main_on_processes
TRACEBACK_VARIABLE = "KINDYN_TRACEBACK"  # set it to see the traceback of an internal error
MAX_ENSEMBLE = 10_000  # realisations of kindyn ensemble
MAX_THREADS = 4096
MAX_OPTION_TEXT = 10_000


def _available_commands():
    found = {}
    for name in COMMANDS:
        try:
            found[name] = importlib.import_module(f"kindyn.commands.{name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"kindyn.commands.{name}":
                raise
    return found


def build_parser(commands) -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="kindyn", description="Kinematic dynamos of prescribed flows in periodic boxes.")
    parser.add_argument("--version", action="version", version=f"kindyn {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for name, module in commands.items():
        p = sub.add_parser(name, help=module.HELP, description=module.HELP)
        module.add_arguments(p)
    return parser


def main(argv=None) -> int:
    from kindyn.transforms.launch import launched_processes

    processes = launched_processes()
    if processes > 1 and not _ON_PROCESSES:
        from kindyn.commands.processes import main_on_processes

        _ON_PROCESSES.append(True)
        return main_on_processes(main, argv, processes)
    configure_openmp_wait()  # before any command starts pyfftw's or numba's OpenMP threads
    commands = _available_commands()
    args = build_parser(commands).parse_args(argv)
    try:
        check_options(args)
        with case_purpose(args):
            if getattr(args, "json", False):
                with stdout_reserved_for_json():
                    return commands[args.command].execute(args)
            return commands[args.command].execute(args)
    except NumericalError as exc:
        print(f"kindyn {args.command}: numerical failure: {one_line(exc)}", file=sys.stderr)
        return 1
    except WriteError as exc:  # computed, but an output file could not be written; the results were kept
        print(f"kindyn {args.command}: failure: {one_line(exc)}", file=sys.stderr)
        return 1
    except KindynError as exc:
        print(f"kindyn {args.command}: error: {one_line(exc)}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"kindyn {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # stdout closed by the reader (`kindyn run ... | head`): nothing left to say
        import contextlib

        with contextlib.suppress(Exception):  # so that the interpreter's final flush does not fail again
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except MemoryError:
        print(f"kindyn {args.command}: failure: out of memory (beyond the case's memory estimate); "
              "use a smaller grid or fewer modes, test fields or threads", file=sys.stderr)
        return 1
    except RecursionError as exc:
        if _traceback_wanted():
            raise
        print(f"kindyn {args.command}: error: input nested too deeply ({one_line(exc)})", file=sys.stderr)
        return 2
    except Exception as exc:  # noqa: BLE001 -- a programming error: one line, never a traceback
        if _traceback_wanted():
            raise
        print(f"kindyn {args.command}: internal error: {type(exc).__name__}: {one_line(exc)} "
              f"(a bug in kindyn; please report it; {TRACEBACK_VARIABLE}=1 shows the traceback)", file=sys.stderr)
        return 1


def _traceback_wanted() -> bool:
    return bool(os.environ.get(TRACEBACK_VARIABLE))


def case_purpose(args):
    """What the command loads its case(s) for (:func:`kindyn.case.budget.purpose`): the memory
    estimate and the eigenvalue-count checks depend on it; with ``--scheduler`` the points run on
    the cluster's machines, so this machine's memory and cores are not the limit."""
    from kindyn.case.budget import purpose

    name = PURPOSES.get(args.command, "run")
    return purpose(name, local=not getattr(args, "scheduler", None))


def check_options(args) -> None:
    """Command-line options checked before the case is read (one ParameterError line, exit 2)."""
    from kindyn.case.budget import usable_cores
    from kindyn.case.modes_section import MAX_COUNT

    def whole(name, value, low, high, why=""):
        if value is not None and not (low <= value <= high):
            raise ParameterError(name, value, f"a whole number >= {low} and <= {high}{why}")

    command = args.command
    if command == "modes":
        whole("--count", getattr(args, "count", None), 1, MAX_COUNT)
    if command == "ensemble":
        whole("--count", getattr(args, "count", None), 1, MAX_ENSEMBLE)
    if command == "sweep":
        cores = usable_cores()
        scheduler = getattr(args, "scheduler", None)
        threads = getattr(args, "threads_per_run", None)
        if scheduler:
            from kindyn.sweep.dask_pool import check_scheduler_address

            check_scheduler_address(scheduler)
            whole("--threads-per-run", threads, 1, MAX_THREADS)  # the workers' cores are checked on connecting
        else:
            whole("--threads-per-run", threads, 1, cores, f" (the cores this process may use: {cores})")
            # --workers: kindyn.sweep.execution.check_local_layout keeps workers x threads <= cores
        grids = getattr(args, "grids", None)
        if grids is not None and (len(grids) > MAX_OPTION_TEXT or re.search(r"\d{13}", grids)):
            raise ParameterError("--grids", grids, f"a list of grids of at most {MAX_OPTION_TEXT} characters, "
                                 "each size of at most 12 digits")


if __name__ == "__main__":
    sys.exit(main())
