"""The ``[sweep]`` case section: which case keys vary, and how.

A swept key is a quoted dotted case key (``"magnetic.Rm"``, ``"flow.A"``, ``"domain.grid"``) whose
value is either an explicit list of values or a range table::

    [sweep]
    "magnetic.Rm" = [5, 10, 20]                                   # explicit values
    "flow.A" = { start = 0.5, stop = 2.0, count = 4, spacing = "log" }   # a range
    combine = "product"          # or "zip": the lists are walked side by side
    method = "growth"            # how each point is solved (a name in kindyn.sweep.methods.METHODS)
    critical = "magnetic.Rm"     # key along which sign changes of gamma are sought (default:
                                 # magnetic.Rm if swept, else the only numeric key; none for a zip
                                 # of several keys)
    refine = false               # refine every sign change by bracketing runs (or: --refine)
    refine_runs = 6              # at most this many extra runs per sign change
    refine_width = 0.005         # stop when the bracket is narrower than this fraction of its centre

Option keys contain no dot; every key with a dot is a swept key. Range spacing is ``"linear"``
(``numpy.linspace``) or ``"log"`` (``numpy.geomspace``, positive ends only); values are rounded to
12 significant digits so that a point's identity does not depend on round-off.

The section describes *how many* cases are run, not the physics of any one of them, so the
validated object contributes nothing to :attr:`kindyn.case.Case.resolved` (``as_dict() == {}``):
the identity of a point is the content of its resolved case and does not change when the list it
came from is extended.

The case package validates the section (it sits below the drivers and does not know them), so it
checks only that ``method`` is a name; :func:`validate_sweep` of :mod:`kindyn.sweep.spec` also
checks the name against the methods the sweep package registers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from kindyn.case import schema
from kindyn.errors import CaseError

COMBINATIONS = ("product", "zip")
SPACINGS = ("linear", "log")
RANGE_KEYS = ("start", "stop", "count", "spacing")
OPTION_DEFAULTS = {
    "combine": "product",
    "method": "growth",
    "critical": None,
    "refine": False,
    "refine_runs": 6,
    "refine_width": 0.005,
}
SIGNIFICANT_DIGITS = 12
MAX_POINTS = 10_000  # points of a whole sweep (each is at least one run)
MAX_REFINE_RUNS = 100  # bisections beyond ~50 cannot narrow a bracket of doubles further


@dataclass(frozen=True)
class SweepSpec:
    """A validated ``[sweep]`` section.

    ``keys`` and ``values`` are parallel tuples: ``values[i]`` is the tuple of values taken by the
    dotted case key ``keys[i]`` (in the order given). ``critical`` is the numeric key along which
    sign changes of the growth rate are located (``None``: no such key).
    """

    file: str
    keys: tuple[str, ...]
    values: tuple[tuple, ...]
    combine: str = "product"
    method: str = "growth"
    critical: str | None = None
    refine: bool = False
    refine_runs: int = 6
    refine_width: float = 0.005
    log_spaced: frozenset[str] = field(default_factory=frozenset)

    def __bool__(self) -> bool:
        return bool(self.keys)

    def as_dict(self) -> dict:
        """Nothing: the sweep does not enter a point's resolved case (see module docstring)."""
        return {}

    def describe(self) -> dict:
        """The spec as plain data (for provenance attributes and --json)."""
        return {"keys": list(self.keys), "values": [list(v) for v in self.values],
                "combine": self.combine, "method": self.method, "critical": self.critical,
                "refine": self.refine, "refine_runs": self.refine_runs, "refine_width": self.refine_width}


NO_SWEEP = SweepSpec(file="", keys=(), values=())


def round_value(x: float) -> float:
    """``x`` rounded to :data:`SIGNIFICANT_DIGITS` significant digits (identity-stable floats)."""
    if x == 0 or not math.isfinite(x):
        return float(x)
    return float(f"{x:.{SIGNIFICANT_DIGITS}g}")


def validate_sweep(raw, file: str, methods: tuple[str, ...] | None = None) -> SweepSpec:
    """Validate the raw ``[sweep]`` table of ``file``; an absent section gives an empty spec.

    ``methods`` are the allowed ``method`` names (``None``: any name; the sweep package passes its
    registry). Raises :class:`~kindyn.errors.CaseError` naming the file, the ``sweep.<key>`` and
    what is expected. (An absent section returns :data:`NO_SWEEP`, which is falsy and has
    ``as_dict()``, so that :attr:`Case.resolved` keeps working for every case.)
    """
    if raw is None:
        return NO_SWEEP
    if not isinstance(raw, dict):
        raise CaseError(file, "sweep", raw, "[sweep] to be a table of swept keys and options")
    options = dict(OPTION_DEFAULTS)
    keys, values, log_keys = [], [], set()
    for key, value in raw.items():
        where = f'sweep."{key}"' if "." in key else f"sweep.{key}"
        if "." in key:
            check_swept_key(key, file, where)
            vals, is_log = swept_values(value, file, where)
            keys.append(key)
            values.append(vals)
            if is_log:
                log_keys.add(key)
        elif key in options:
            options[key] = value
        else:
            raise CaseError(file, where, value, "a quoted dotted case key such as \"magnetic.Rm\" with a list "
                            "of values, or an option: " + ", ".join(OPTION_DEFAULTS))
    if not keys:
        raise CaseError(file, "sweep", "{}", 'at least one swept key, e.g. "magnetic.Rm" = [5, 10, 20]')
    if "magnetic.eta" in keys and "magnetic.Rm" in keys:  # a case gives one of them (Rm = U/(eta k_f))
        raise CaseError(file, 'sweep."magnetic.eta"', raw["magnetic.eta"],
                        'no list beside "magnetic.Rm": a point gives eta or Rm, not both (sweep one of them)')
    _check_option(options, "combine", schema.choice(*COMBINATIONS), file)
    _check_option(options, "method", schema.string if methods is None else schema.choice(*methods), file)
    _check_option(options, "refine", schema.boolean, file)
    _check_option(options, "refine_runs", schema.bounded_integer(1, MAX_REFINE_RUNS), file)
    _check_option(options, "refine_width", schema.positive, file)
    if options["combine"] == "zip" and len({len(v) for v in values}) > 1:
        raise CaseError(file, "sweep.combine", "zip", "lists of equal length for a zipped sweep (lengths "
                        + ", ".join(f"{k}: {len(v)}" for k, v in zip(keys, values)) + ")")
    total = len(values[0]) if options["combine"] == "zip" else math.prod(len(v) for v in values)
    if total > MAX_POINTS:
        raise CaseError(file, "sweep", f"{total} points", f"at most {MAX_POINTS} points in one sweep "
                        "(the product of the list lengths; split the sweep)")
    if options["combine"] == "product":
        for key, vals in zip(keys, values):
            _require_distinct(vals, file, f'sweep."{key}"', list(vals))
    else:
        _require_distinct(list(zip(*values)), file, "sweep.combine", "zip")
    options["critical"] = _critical_key(options["critical"], keys, values, file, options["combine"])
    return SweepSpec(file, tuple(keys), tuple(values), options["combine"], options["method"],
                     options["critical"], options["refine"], options["refine_runs"],
                     float(options["refine_width"]), frozenset(log_keys))


def _require_distinct(items, file, where, shown) -> None:
    seen = []
    for item in items:
        if item in seen:
            raise CaseError(file, where, shown, f"distinct values ({item!r} is repeated)")
        seen.append(item)


def _check_option(options, name, convert, file):
    try:
        options[name] = convert(options[name])
    except ValueError as exc:
        raise CaseError(file, f"sweep.{name}", options[name], str(exc)) from None


def check_swept_key(key: str, file: str, where: str) -> None:
    """A swept key must name a known section and (outside ``[flow]``) a known key of it."""
    from kindyn.case.sections import SECTIONS

    parts = key.split(".")
    if any(not p.strip() for p in parts):
        raise CaseError(file, where, key, "a dotted case key such as \"magnetic.Rm\"")
    section = parts[0]
    if section == "sweep":
        raise CaseError(file, where, key, "a key of another section (a sweep cannot sweep itself)")
    if section == "flow":
        return  # flow parameters depend on the flow type; each point's case checks them
    if section not in SECTIONS:
        raise CaseError(file, where, key, "a key of a known section: " + ", ".join(sorted(set(SECTIONS) | {"flow"})))
    keys = SECTIONS[section].key_table()
    if len(parts) != 2 or parts[1] not in keys:
        raise CaseError(file, where, key, f"a key of [{section}]: " + ", ".join(keys))


def swept_values(value, file: str, where: str) -> tuple[tuple, bool]:
    """The values of one swept key: a non-empty list, or a range table (see module docstring)."""
    if isinstance(value, list):
        if not value:
            raise CaseError(file, where, value, "a non-empty list of values")
        if len(value) > MAX_POINTS:
            raise CaseError(file, where, f"a list of {len(value)} values", f"at most {MAX_POINTS} values")
        for v in value:
            problem = _plain_problem(v)
            if problem:
                raise CaseError(file, where, v, f"a list of plain values (finite numbers, strings, lists of them): "
                                f"{problem}")
        return tuple(value), False
    if isinstance(value, dict):
        return _range_values(value, file, where)
    raise CaseError(file, where, value, "a list of values, or a range { start = ..., stop = ..., count = ..., "
                    "spacing = \"linear\" or \"log\" }")


def _plain_problem(value, depth: int = 0) -> str:
    """Why ``value`` cannot be a swept value ('' if it can): it must be written back as a TOML
    override (``--set key=value``), so NaN, infinities, tables and dates are refused."""
    if isinstance(value, bool) or isinstance(value, str):
        return ""
    if isinstance(value, int):
        return "" if abs(value) <= schema.MAX_INTEGER else "a whole number below 2**63"
    if isinstance(value, float):
        return "" if math.isfinite(value) else "a finite number (not nan or inf)"
    if isinstance(value, list):
        if depth >= 2:
            return "lists nested at most two deep"
        return next((p for p in (_plain_problem(v, depth + 1) for v in value) if p), "")
    return f"not a {type(value).__name__}"


def _range_values(table: dict, file: str, where: str) -> tuple[tuple, bool]:
    import numpy as np

    for k in table:
        if k not in RANGE_KEYS:
            raise CaseError(file, f"{where}.{k}", table[k], "a key of a range: " + ", ".join(RANGE_KEYS))
    for k in ("start", "stop", "count"):
        if k not in table:
            raise CaseError(file, f"{where}.{k}", "<missing>", "start, stop and count in a range table")
    try:
        start, stop = schema.number(table["start"]), schema.number(table["stop"])
    except ValueError as exc:
        raise CaseError(file, f"{where}.start/stop", [table["start"], table["stop"]], str(exc)) from None
    try:
        count = schema.bounded_integer(1, MAX_POINTS)(table["count"])
    except ValueError as exc:
        raise CaseError(file, f"{where}.count", table["count"], str(exc)) from None
    spacing = table.get("spacing", "linear")
    if spacing not in SPACINGS:
        raise CaseError(file, f"{where}.spacing", spacing, "one of " + ", ".join(f'"{s}"' for s in SPACINGS))
    if count > 1 and start == stop:
        raise CaseError(file, f"{where}.stop", stop, "a value different from start when count > 1")
    if spacing == "log":
        if start <= 0 or stop <= 0:
            raise CaseError(file, f"{where}.start/stop", [start, stop], "positive ends for log spacing")
        raw = np.geomspace(start, stop, count) if count > 1 else np.array([start])
    else:
        raw = np.linspace(start, stop, count) if count > 1 else np.array([start])
    vals = [round_value(float(v)) for v in raw]
    whole = all(isinstance(table[k], int) and not isinstance(table[k], bool) for k in ("start", "stop"))
    if whole and all(float(v).is_integer() for v in vals):
        vals = [int(v) for v in vals]
    if len(set(vals)) != len(vals):
        raise CaseError(file, f"{where}.count", count, "fewer points: the range gives repeated values")
    return tuple(vals), spacing == "log"


def _critical_key(name, keys, values, file, combine):
    """The key along which sign changes are sought: given, or magnetic.Rm, or the only numeric key.

    A zip of several keys has no line along which only one key varies: no default there.
    """
    numeric = [k for k, v in zip(keys, values) if all(_is_number(x) for x in v)]
    if name is not None:
        if not isinstance(name, str) or name not in keys:
            raise CaseError(file, "sweep.critical", name, "one of the swept keys: " + ", ".join(keys))
        if name not in numeric:
            raise CaseError(file, "sweep.critical", name, "a swept key whose values are numbers")
        return name
    if combine == "zip" and len(keys) > 1:
        return None
    if "magnetic.Rm" in numeric:
        return "magnetic.Rm"
    return numeric[0] if len(numeric) == 1 else None


def _is_number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)
