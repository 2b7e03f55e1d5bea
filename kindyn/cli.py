"""The ``kindyn`` command line: ``kindyn COMMAND CASE.toml [options]``.

Each command lives in :mod:`kindyn.commands` as a module with ``HELP``, ``add_arguments(parser)``
and ``execute(args) -> int``. Every :class:`~kindyn.errors.KindynError` becomes one line on stderr
and exit code 2 (1 for numerical failures); tracebacks are for programming errors only.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from kindyn import __version__
from kindyn.errors import KindynError, NumericalError
from kindyn.array_kernels import configure_openmp_wait

COMMANDS = ("run", "ensemble", "flow", "testfield", "sweep", "modes")


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
    configure_openmp_wait()  # before any command starts pyfftw's or numba's OpenMP threads
    commands = _available_commands()
    args = build_parser(commands).parse_args(argv)
    try:
        return commands[args.command].execute(args)
    except NumericalError as exc:
        print(f"kindyn {args.command}: numerical failure: {exc}", file=sys.stderr)
        return 1
    except KindynError as exc:
        print(f"kindyn {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"kindyn {args.command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
