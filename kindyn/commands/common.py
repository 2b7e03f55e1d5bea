"""Pieces shared by the commands: common options, case loading, where each line goes, JSON printing.

Where output goes (the same for every command; README "Commands"):

* **results** (growth rate, error, frequency, converged, coefficients, critical values, output
  paths) and **cautions**: stdout, always (``--quiet`` never hides them);
* **progress** (what is being computed now): stderr, silenced by ``--quiet``;
* with ``--json`` stdout holds exactly one JSON object: the results are only in it, and every
  caution is in it (``cautions``) *and* on stderr. Anything else that would print on stdout while
  the command runs (a user flow module on import, a library) is sent to stderr instead
  (:func:`stdout_reserved_for_json`, used by :mod:`kindyn.cli`).
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import sys
from pathlib import Path

from kindyn.case import load_case

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


def case_from_args(args):
    return load_case(args.case, args.overrides)


def output_folder(args) -> Path:
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    return out


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

    def progress(self, text: str) -> None:
        if not self.quiet:
            say(text)

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


def number_text(value, digits: int = 6, sign: bool = False) -> str:
    """``value`` with ``digits`` significant digits, ``n/a`` for None/NaN."""
    if value is None or not math.isfinite(float(value)):
        return "n/a" if value is None or math.isnan(float(value)) else f"{float(value):{'+' if sign else ''}g}"
    return f"{float(value):{'+' if sign else ''}.{digits}g}"


def with_error(value, error, sign: bool = False, digits: int = 6) -> str:
    """``value +- error`` with the error rounded to one significant digit and the value to the same
    decimal place (``0.05296 +- 0.0004`` -> ``0.0530 +- 0.0004``).

    Without an error (None, NaN) the value keeps ``digits`` significant digits and is marked
    ``(no error estimate)``; an infinite error reads ``+- inf``; a zero error keeps ``digits``.
    """
    if value is None or not math.isfinite(float(value)):
        return number_text(value, digits, sign)
    value = float(value)
    if error is None or math.isnan(float(error)):
        return f"{number_text(value, digits, sign)} (no error estimate)"
    error = abs(float(error))
    if math.isinf(error):
        return f"{number_text(value, digits, sign)} +- inf"
    if error == 0.0:
        return f"{number_text(value, digits, sign)} +- 0"
    exponent = math.floor(math.log10(error))
    rounded = round(error, -exponent)
    if rounded >= 10.0 ** (exponent + 1):  # 0.096 -> 0.1
        exponent += 1
    decimals = -exponent
    plus = "+" if sign else ""
    big = max(abs(value), error)
    if decimals < 0 and big < 1e6:  # 1234.5 +- 23 -> 1230 +- 20
        return f"{round(value, decimals):{plus}.0f} +- {round(error, decimals):.0f}"
    if decimals >= 0 and (big >= 1e-4 or value == 0.0) and big < 1e6:
        if decimals > 12:  # an error far below the value's digits: twelve significant digits are enough
            return f"{value:{plus}.12g} +- {rounded:.0e}"
        return f"{value:{plus}.{decimals}f} +- {error:.{decimals}f}"
    # scientific: value and error in units of 10^e of the value (or of the error, if larger)
    e = math.floor(math.log10(big))
    places = max(0, e - exponent)
    scale = 10.0 ** e
    return f"({value / scale:{plus}.{places}f} +- {error / scale:.{places}f})e{e:+d}"


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
