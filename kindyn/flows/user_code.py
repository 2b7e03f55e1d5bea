"""Running the user's Python code (a callable flow) without letting it take over kindyn.

A case may name a Python function (``function = "module:function"`` or ``"file.py:function"``).
Importing the module and calling the function are the only places where code that kindyn does not
control runs, so both go through this module:

* anything the code raises, including ``SystemExit`` (``sys.exit(0)`` would otherwise end kindyn
  with status 0 and no output, which looks like success), becomes one line naming the module and
  the function: :class:`~kindyn.errors.ParameterError` while the case is built (the loader adds the
  file and key; exit status 2) and :class:`~kindyn.errors.FlowError` during a run (exit status 2);
  ``KeyboardInterrupt`` is left alone (the user asked to stop);
* whatever the code prints goes to stderr, never to stdout, so ``--json`` keeps stdout to exactly
  one JSON object (Python-level ``print``/``sys.stdout``; writes to file descriptor 1 from C
  extensions are not intercepted).
"""

from __future__ import annotations

import contextlib
import importlib
import importlib.util
import sys
from pathlib import Path

from kindyn.errors import FlowError, ParameterError

MESSAGE_LIMIT = 200


def describe(exc: BaseException, when: str = "") -> str:
    """``"called sys.exit(7) WHEN"`` or ``"raised ValueError WHEN: text"`` on one clipped line."""
    when = f" {when}" if when else ""
    if isinstance(exc, SystemExit):
        return f"called sys.exit({exc.code!r}){when}"
    text = " ".join(str(exc).split())
    if len(text) > MESSAGE_LIMIT:
        text = text[: MESSAGE_LIMIT - 3] + "..."
    return f"raised {type(exc).__name__}{when}" + (f": {text}" if text else "")


@contextlib.contextmanager
def user_code():
    """Redirect ``sys.stdout`` to stderr while user code runs."""
    with contextlib.redirect_stdout(sys.stderr):
        yield


def load_function(spec, case_dir):
    """The function named ``"module:function"`` or ``"path/file.py:function"`` (path from ``case_dir``)."""
    expected = '"module:function" or "path/to/file.py:function"'
    if not isinstance(spec, str) or ":" not in spec:
        raise ParameterError("function", spec, expected)
    target, name = spec.rsplit(":", 1)
    if not target or not name.isidentifier():
        raise ParameterError("function", spec, expected)
    try:
        with user_code():
            if target.endswith(".py") or "/" in target or "\\" in target:
                path = (Path(case_dir) / target).resolve()
                if not path.is_file():
                    raise ParameterError("function", spec, f"an existing Python file ({path} not found)")
                module_spec = importlib.util.spec_from_file_location(f"kindyn_user_flow_{abs(hash(str(path)))}",
                                                                     path)
                if module_spec is None or module_spec.loader is None:  # e.g. a file without the .py suffix
                    raise ParameterError("function", spec, f"a Python source file ending in .py ({path} is not one)")
                module = importlib.util.module_from_spec(module_spec)
                module_spec.loader.exec_module(module)
            else:
                module = importlib.import_module(target)
    except ParameterError:
        raise
    except (Exception, SystemExit) as exc:  # user code: one line, no traceback, never kindyn's exit
        raise ParameterError("function", spec, f"a module that imports cleanly: importing module {target} "
                             f"(for function {name}) {describe(exc)}") from None
    function = getattr(module, name, None)
    if not callable(function):
        raise ParameterError("function", spec, f"a callable named {name} in {target}")
    return function


def call(raw, what: str, t: float, *args):
    """``raw(*args)`` with stdout redirected; anything it raises becomes a one-line FlowError."""
    try:
        with user_code():
            return raw(*args)
    except (ParameterError, FlowError):
        raise
    except (Exception, SystemExit) as exc:  # user code: report in one line, never a traceback
        raise FlowError(f"the {what} {describe(exc, f'at t = {t:g}')}") from None
