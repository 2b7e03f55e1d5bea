"""Pieces shared by the commands: common options, case loading, where each line goes, JSON printing.

Where output goes (the same for every command; README "Commands"):

* **results** (growth rate, error, frequency, converged, coefficients, critical values, output
  paths) and **cautions**: stdout, always (``--quiet`` never hides them);
* **progress** (what is being computed now): stderr, silenced by ``--quiet``;
* with ``--json`` stdout holds exactly one JSON object: the results are only in it, and every
  caution is in it (``cautions``) *and* on stderr. Anything else that would print on stdout while
  the command runs (a user flow module on import, a library) is sent to stderr instead
  (:func:`stdout_reserved_for_json`, used by :mod:`kindyn.cli`);
* **notes** (a run resumed from a checkpoint, the array kernels' fallback): stderr, also with
  ``--quiet``.

Progress lines of long computations carry the elapsed time and an ETA
(:meth:`Reporter.update` with a :class:`kindyn.commands.progress.Progress`), at most one every two
seconds. The figure options (``--figure-format``, ``--figure-size``, ``--figure-dpi``) are the
case's ``[output]`` keys ``figure_format``, ``figure_size``, ``figure_dpi``
(:func:`figure_overrides`). Every file records the command that wrote it (:func:`command_text`).
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import sys
from pathlib import Path

from kindyn.case import load_case
from kindyn.errors import CaseError
from kindyn.output.numbers import number_text, with_error  # noqa: F401 (re-exported)

_json_stream = None  # the real stdout while stdout_reserved_for_json is active

NO_ESTIMATE = "not converged, no estimate yet"


def add_case_arguments(parser) -> None:
    parser.add_argument("case", help="case file (TOML)")
    parser.add_argument("--out", default="kindyn-output", help="output folder (default: kindyn-output)")
    parser.add_argument("--set", dest="overrides", action="append", default=[], metavar="SECTION.KEY=VALUE",
                        help="override a case key (value typed as TOML); may be repeated")
    parser.add_argument("--json", action="store_true",
                        help="print exactly one JSON object on stdout (cautions also on stderr)")


def add_quiet_argument(parser) -> None:
    parser.add_argument("--quiet", action="store_true",
                        help="no progress lines on stderr (results and cautions are always printed)")


FIGURE_FORMATS = ("png", "pdf", "svg")


def add_figure_arguments(parser) -> None:
    group = parser.add_argument_group("figures (the [output] keys figure_format, figure_size, figure_dpi)")
    group.add_argument("--figure-format", choices=FIGURE_FORMATS, default=None,
                       help="file format of the figures (default png)")
    group.add_argument("--figure-size", default=None, metavar="W,H",
                       help="width and height of the figures in inches, e.g. 3.4,2.6 (default: each figure's own)")
    group.add_argument("--figure-dpi", type=int, default=None, metavar="DPI",
                       help="resolution of PNG figures in dots per inch (default 300)")


def figure_overrides(args) -> list[str]:
    """The figure options as ``--set`` overrides of the case's ``[output]`` section."""
    out = []
    if getattr(args, "figure_format", None):
        out.append(f'output.figure_format="{args.figure_format}"')
    size = getattr(args, "figure_size", None)
    if size:
        parts = [p.strip() for p in str(size).replace("x", ",").split(",")]
        try:
            width, height = (float(p) for p in parts)
        except ValueError:
            raise CaseError("--figure-size", "figure_size", size, "W,H: width and height in inches, e.g. 3.4,2.6") \
                from None
        out.append(f"output.figure_size=[{width!r}, {height!r}]")
    if getattr(args, "figure_dpi", None) is not None:
        out.append(f"output.figure_dpi={int(args.figure_dpi)}")
    return out


def case_from_args(args):
    return load_case(args.case, [*args.overrides, *figure_overrides(args)])


@contextlib.contextmanager
def command_environment(command: str):
    """While the block runs, files written by this process and the processes it starts (sweep
    points, test-field realisations) record ``command`` (:func:`kindyn.output.netcdf.command_line`)."""
    from kindyn.output.netcdf import COMMAND_VARIABLE

    previous = os.environ.get(COMMAND_VARIABLE)
    os.environ[COMMAND_VARIABLE] = command
    try:
        yield
    finally:
        if previous is None:
            os.environ.pop(COMMAND_VARIABLE, None)
        else:
            os.environ[COMMAND_VARIABLE] = previous


def command_text(args) -> str:
    """The command line of ``args`` as a user would type it (``kindyn run case.toml --out o ...``),
    recorded in every file the command writes."""
    import shlex

    words = ["kindyn", str(getattr(args, "command", "") or "")]
    options = dict(vars(args))
    options.pop("command", None)
    if "case" in options:
        words.append(str(options.pop("case")))
    for key, value in options.items():
        flag = "--" + key.replace("_", "-")
        if key == "overrides":
            flag = "--set"
        if value is None or value is False or value == []:
            continue
        if value is True:
            words.append(flag)
        elif isinstance(value, (list, tuple)):
            for item in value:
                words += [flag, str(item)]
        else:
            words += [flag, str(value)]
    return " ".join(shlex.quote(w) for w in words if w)


def output_folder(args, case=None, names=()) -> Path:
    """The ``--out`` folder, created and checked before any computation together with the file
    ``names`` the command will write there (:func:`kindyn.output.atomic.check_output`: a folder that
    can be written, names the file system accepts; one line and exit code 2 otherwise)."""
    from kindyn.output.atomic import check_output

    where = getattr(case, "path", "") if case is not None else ""
    key = "output.name (or the case file's name)" if case is not None else "output name"
    return check_output(args.out, names, file=where, key=key)


@contextlib.contextmanager
def results_kept(results, note: str = ""):
    """While the block writes the output files: if a write fails (disk full, the folder removed),
    print the results on stdout as one JSON object (``results()``, the command's summary without
    the files) and raise :class:`~kindyn.errors.WriteError` (one line, exit code 1; ``note`` adds
    what else is kept, e.g. a checkpoint), so that a finished computation is never lost. The
    atomic writers have removed their temporaries."""
    from kindyn.errors import WriteError
    from kindyn.output.atomic import OutputWriteFailure

    try:
        yield
    except OutputWriteFailure as exc:
        target = exc.filename or "an output file"
        try:
            kept = dict(results())
            kept["output_error"] = f"{target}: {exc.strerror or exc}"
            print_json(kept)
            where = "the results are on stdout (JSON)"
        except Exception as failure:  # noqa: BLE001 -- the write error is what the user must hear
            where = f"the results could not be printed either ({type(failure).__name__})"
        raise WriteError(f"could not write {target}: {exc.strerror or exc}; {where}{note}") from None


def print_json(obj) -> None:
    """The one JSON object of ``--json`` on the real stdout."""
    stream = _json_stream if _json_stream is not None else sys.stdout
    print(json.dumps(obj, default=_json_default, allow_nan=False), file=stream, flush=True)


@contextlib.contextmanager
def stdout_reserved_for_json():
    """While the block runs, stdout (the Python object and, where it has one, file descriptor 1, so
    that child processes and C libraries are covered too) goes to stderr; :func:`print_json`
    writes to the real stdout."""
    global _json_stream
    real = sys.stdout
    with contextlib.suppress(Exception):
        real.flush()
    fd = saved = None
    try:
        fd, err_fd = real.fileno(), sys.stderr.fileno()
        saved = os.dup(fd)
        os.dup2(err_fd, fd)
        stream = os.fdopen(saved, "w", encoding=getattr(real, "encoding", None) or "utf-8", closefd=False)
    except (AttributeError, OSError, ValueError):  # no file descriptor (a test's StringIO): Python level only
        fd = saved = None
        stream = real
    previous, _json_stream = _json_stream, stream
    sys.stdout = sys.stderr
    try:
        yield
    finally:
        sys.stdout = real
        _json_stream = previous
        with contextlib.suppress(Exception):
            stream.flush()
        if saved is not None:
            with contextlib.suppress(Exception):
                real.flush()
            os.dup2(saved, fd)
            os.close(saved)


def _json_default(value):
    try:
        import numpy as np

        if isinstance(value, np.ndarray):
            return value.tolist()
        if isinstance(value, (np.floating, np.integer, np.bool_)):
            return value.item()
    except ImportError:  # pragma: no cover
        pass
    return str(value)


def clean_number(x):
    """``None`` for NaN/Inf so that JSON stays valid."""
    return None if x is None or not math.isfinite(float(x)) else float(x)


def say(text: str) -> None:
    """A line for the human on stderr (progress; stdout is kept for results and --json)."""
    print(text, file=sys.stderr, flush=True)


class Reporter:
    """Sends each kind of line where the module docstring says (one per command execution)."""

    def __init__(self, command: str, args):
        self.command = command
        self.json = bool(getattr(args, "json", False))
        self.quiet = bool(getattr(args, "quiet", False))
        self.command_line = command_text(args)
        self._throttle = None

    def progress(self, text: str) -> None:
        if not self.quiet:
            say(text)

    def update(self, progress, force: bool = False) -> None:
        """A :class:`~kindyn.commands.progress.Progress` update as one line with the elapsed time and
        the ETA (stderr), at most one every two seconds unless ``force``; nothing with ``--quiet``."""
        if self.quiet:
            return
        if self._throttle is None:
            from kindyn.commands.progress import Throttle

            self._throttle = Throttle(lambda p: say(p.line()))
        self._throttle(progress, force)

    @property
    def progress_callback(self):
        """``None`` with ``--quiet`` (so that drivers skip formatting), else :meth:`progress`."""
        return None if self.quiet else self.progress

    def result(self, text: str) -> None:
        if not self.json:
            print(text, file=sys.stdout, flush=True)

    def caution(self, text: str) -> None:
        if self.json:
            say(f"kindyn {self.command}: caution: {text}")
        else:
            print(f"caution: {text}", file=sys.stdout, flush=True)

    def note(self, text: str) -> None:
        """Information that is neither a result nor progress (stderr, also with --quiet)."""
        say(f"kindyn {self.command}: note: {text}")

    def finish(self, summary: dict) -> None:
        if self.json:
            print_json(summary)


# number_text and with_error live in kindyn.output.numbers (the figures print the same digits)


def has_estimate(summary: dict) -> bool:
    """A growth estimate exists once it has a finite rate *and* a finite error."""
    return summary.get("growth_rate") is not None and summary.get("growth_rate_error") is not None


def settle_estimate(summary: dict) -> dict:
    """A growth run's summary (``kindyn run``, ensemble members) when it stopped before an estimate
    with an error existed: ``growth_rate``, ``growth_rate_error`` and ``frequency`` become null
    (:data:`NO_ESTIMATE`), the value reached so far is kept as ``growth_rate_preliminary``; adds
    ``estimate_available``."""
    available = has_estimate(summary)
    summary["estimate_available"] = available
    summary["growth_rate_preliminary"] = None if available else summary.get("growth_rate")
    if not available:
        summary.update(growth_rate=None, growth_rate_error=None, frequency=None, converged=False)
    return summary
