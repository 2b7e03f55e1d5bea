"""Cases for the library: from a file, a TOML string or a dict, with overrides and a Python flow.

:func:`load_case` accepts

* a path to a case file (``str`` or :class:`~pathlib.Path`): exactly what ``kindyn COMMAND FILE``
  reads;
* TOML text (a string with a newline or a ``[section]`` that names no existing file);
* a dict of sections (``{"domain": {"grid": [16, 16, 16]}, "flow": {"type": "abc"}, ...}``), the
  same keys as a file; its TOML text (:func:`toml_text`) is what the output files record.

``overrides`` are ``"section.key=value"`` strings as for ``--set`` (values read as TOML), or a
dict ``{"section.key": value}`` (values as Python). ``flow=f`` passes a Python callable
``f(x, y, z, t, **parameters)`` as the flow: it becomes a ``"callable"`` flow whose function is
the object itself (wrapped in :class:`PythonFunction`), checked like every user flow before
anything runs; the case's other ``[flow]`` keys (``U``, ``k_f``, ``steady``, ``period``,
``parameters``, ...) still apply. A dict case may also hold the callable itself as
``flow.function``.

Identity: a case's fingerprint (checkpoints, sweep points) is built from its resolved values; for
a Python function it holds the function's qualified name and a hash of the velocity it gives on
the case's grid at the check times (:data:`kindyn.flows.user.CHECK_TIMES`), so a changed function
never resumes another's checkpoint. Errors are :class:`~kindyn.errors.CaseError` (file, key,
value, expected), as on the command line; a text or dict case is named ``<text>`` or ``<dict>``
in messages, and its output files are called ``[output] name`` (default ``name``, else "case").
"""

from __future__ import annotations

import copy
import hashlib
import importlib
import json
import math
from collections.abc import Mapping
from pathlib import Path

from kindyn.errors import CaseError

DEFAULT_NAME = "case"


class PythonFunction:
    """A Python callable given to :func:`load_case` as the function of a ``"callable"`` flow.

    Calls go to the callable; ``str()`` is stable across sessions (qualified name and, once the flow
    is built, a hash of its samples), so that it can stand in the resolved case and its fingerprint.
    """

    def __init__(self, function):
        if not callable(function):
            raise CaseError("flow=", "flow.function", repr(function)[:80],
                            "a Python callable f(x, y, z, t, **parameters) returning three components")
        self.function = function
        module = getattr(function, "__module__", None) or type(function).__module__
        name = getattr(function, "__qualname__", None) or type(function).__qualname__
        self.name = f"{module}.{name}"
        self.spec = _importable(function, module, name)
        self.digest = ""

    def __call__(self, *args, **kwargs):
        return self.function(*args, **kwargs)

    def __str__(self) -> str:
        return f"python:{self.name}" + (f"#{self.digest}" if self.digest else "")

    __repr__ = __str__


def _importable(function, module: str, name: str) -> str | None:
    """``"module:name"`` when that text loads the same object (then a case file can name it)."""
    if not module or module == "__main__" or "." in name or "<" in name:
        return None
    try:
        found = getattr(importlib.import_module(module), name, None)
    except Exception:  # noqa: BLE001 -- only a check whether the text form exists
        return None
    return f"{module}:{name}" if found is function else None


def is_text(source) -> bool:
    """A string that is TOML text rather than a file name."""
    if not isinstance(source, str):
        return False
    if "\n" in source or source.lstrip().startswith("["):
        try:
            return not Path(source).exists()
        except (OSError, ValueError):
            return True
    return False


def load_case(source, overrides=(), *, text: str | None = None, flow=None, name: str | None = None):
    """Read, override and validate a case; build its box and flow (see the module docstring)."""
    from kindyn.case.config import apply_overrides, parse_toml, read_toml, validate_config
    from kindyn.case.load import build_case

    overrides = _override_texts(overrides)
    function = None
    if text is not None or is_text(source):
        text = source if text is None else text
        path = "<text>" if text is source or source is None else str(source)
        data = parse_toml(text, path)
        default_name = name or DEFAULT_NAME
    elif isinstance(source, Mapping):
        path = "<dict>"
        data = copy.deepcopy(_plain(dict(source), path))
        default_name = name or DEFAULT_NAME
    else:
        if source is None:
            raise CaseError("load_case", "source", None, "a case file, TOML text or a dict of sections")
        path = str(source)
        text, data = read_toml(path)
        default_name = name
    if isinstance(data.get("flow"), Mapping) and callable(data["flow"].get("function")):
        function = PythonFunction(data["flow"]["function"])
    if flow is not None:
        function = PythonFunction(flow)
        data["flow"] = _python_flow_table(data.get("flow"), path)
    if function is not None:
        data["flow"]["function"] = function
        data["flow"].setdefault("type", "callable")
    if default_name:
        output = data.setdefault("output", {})
        if isinstance(output, dict):
            output.setdefault("name", default_name)
    if isinstance(source, Mapping):
        text = toml_text(data)
    elif function is not None:
        text = text.rstrip("\n") + f"\n# flow.function: {function} (a Python object passed to kindyn.load_case)\n"
    data = apply_overrides(data, overrides)
    config = validate_config(data, path, text, tuple(overrides))
    case = build_case(config)
    if function is not None:
        function.digest = _samples_digest(case)
    return case


def _override_texts(overrides) -> list[str]:
    if isinstance(overrides, Mapping):
        return [f"{key}={_toml_value(value)}" for key, value in overrides.items()]
    if isinstance(overrides, str):
        return [overrides]
    return list(overrides)


def _python_flow_table(table, path: str) -> dict:
    """The [flow] table for ``flow=f``: the case's own keys of a callable flow (type "callable" or
    none given); any other flow type in the case conflicts with ``flow=``."""
    table = dict(table or {})
    kind = table.get("type", "callable")
    if kind != "callable":
        raise CaseError(path, "flow.type", kind, 'no other flow type when flow= passes a Python function (leave '
                        'out [flow] type, or write type = "callable"; keep U, k_f, steady, period, parameters)')
    if "function" in table and not callable(table["function"]):
        raise CaseError(path, "flow.function", table["function"], "no function name when flow= passes one")
    table.pop("function", None)
    table["type"] = "callable"
    return table


def _samples_digest(case) -> str:
    """A hash of the callable flow's velocity on the case's grid at the check times."""
    from kindyn.flows.user import CHECK_TIMES

    flow = case.flow
    digest = hashlib.sha256()
    times = (0.0,) if flow.steady else CHECK_TIMES + ((flow.period / 3.0,) if flow.period else ())
    for t in times:
        digest.update(flow.sampler.grid(t).tobytes())
    return digest.hexdigest()[:16]


def _plain(data, path, where=""):
    """Check a dict case: tables of TOML values (callables allowed only as flow.function)."""
    if isinstance(data, Mapping):
        return {str(k): _plain(v, path, f"{where}.{k}" if where else str(k)) for k, v in data.items()}
    if isinstance(data, (list, tuple)):
        return [_plain(v, path, f"{where}[{i}]") for i, v in enumerate(data)]
    if callable(data) and where == "flow.function":
        return data
    if data is None or isinstance(data, (bool, int, float, str)):
        if data is None:
            raise CaseError(path, where, None, "a TOML value (leave the key out for its default)")
        return data
    try:
        import numpy as np

        if isinstance(data, np.generic):
            return data.item()
    except ImportError:  # pragma: no cover
        pass
    raise CaseError(path, where, repr(data)[:80], "a TOML value: number, string, boolean, list or table")


# --------------------------------------------------------------------------- TOML text of a dict

def _toml_key(key: str) -> str:
    return key if key.replace("_", "").replace("-", "").isalnum() else json.dumps(key)


def _toml_value(value) -> str:
    if isinstance(value, PythonFunction):
        return json.dumps(value.spec or str(value))
    if callable(value):
        return _toml_value(PythonFunction(value))
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else ("nan" if value != value else ("inf" if value > 0 else "-inf"))
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, Mapping):
        return "{ " + ", ".join(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in value.items()) + " }"
    return json.dumps(str(value))


def toml_text(data: Mapping) -> str:
    """TOML text of a dict case (sections, their keys, sub-tables such as ``[flow.parameters]``); a
    Python function is written as ``"module:name"`` when importable, else as its description."""
    lines = []
    notes = []
    for section, table in data.items():
        if not isinstance(table, Mapping):
            lines.append(f"{_toml_key(section)} = {_toml_value(table)}")
            continue
        if lines:
            lines.append("")
        lines.append(f"[{_toml_key(section)}]")
        subtables = []
        for key, value in table.items():
            if isinstance(value, Mapping):
                subtables.append((key, value))
                continue
            if isinstance(value, PythonFunction) and not value.spec:
                notes.append(f"# {section}.{key}: a Python object passed to kindyn.load_case ({value.name}); "
                             "this text cannot load it")
            lines.append(f"{_toml_key(key)} = {_toml_value(value)}")
        for key, value in subtables:
            lines += ["", f"[{_toml_key(section)}.{_toml_key(key)}]"]
            lines += [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in value.items()]
    return "\n".join(notes + lines) + "\n"
