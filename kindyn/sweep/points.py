"""Expansion of a sweep into points, and the resolved case of every point.

A point is the base case plus one override per swept key (``magnetic.Rm=10.0``), applied after the
user's own ``--set`` overrides, exactly as ``kindyn run --set ...`` would apply them. Its identity
is :attr:`kindyn.case.Case.fingerprint` of the resolved case (every value after defaults and
overrides), so a point is recognised by its content, not by its position in the sweep; for a
method other than ``"growth"`` the method name is appended (``<fingerprint>.<method>``).

A point whose case does not validate (say ``magnetic.Rm = 0`` in a list) is kept with its error
message; it is reported as failed and the others still run.
"""

from __future__ import annotations

import itertools
import json
import math
from dataclasses import dataclass

from kindyn.case import load_case
from kindyn.errors import KindynError


@dataclass(frozen=True)
class Point:
    """One case of a sweep.

    ``values``: ``{dotted key: value}`` of the swept keys; ``overrides``: the ``--set`` strings
    that make its case from the case file; ``identity``: file stem of its record
    (``None`` if the case is invalid, then ``error`` holds the message); ``refinement``: added by
    the refinement of a sign change rather than listed in the sweep.
    """

    values: dict
    overrides: tuple[str, ...]
    identity: str | None
    case: object = None
    error: str = ""
    refinement: bool = False

    def label(self) -> str:
        return ", ".join(f"{k} = {format_value(v)}" for k, v in self.values.items())


def toml_literal(value) -> str:
    """``value`` written as a TOML value (for ``section.key=value`` overrides)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"non-finite value {value!r}")
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_literal(v) for v in value) + "]"
    raise ValueError(f"a value TOML can hold, not {type(value).__name__}")


def format_value(value) -> str:
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, (list, tuple)):
        return "[" + ",".join(format_value(v) for v in value) + "]"
    return str(value)


def combinations(spec) -> list[dict]:
    """``[{key: value, ...}, ...]``: the Cartesian product (last key fastest) or the zip of the lists."""
    if spec.combine == "zip":
        rows = zip(*spec.values)
    else:
        rows = itertools.product(*spec.values)
    return [dict(zip(spec.keys, row)) for row in rows]


def point_overrides(values: dict, base_overrides=()) -> tuple[str, ...]:
    return tuple(base_overrides) + tuple(f"{key}={toml_literal(v)}" for key, v in values.items())


def point_identity(case, method: str) -> str:
    return case.fingerprint if method == "growth" else f"{case.fingerprint}.{method}"


def resolve_point(path, text: str, values: dict, base_overrides=(), method: str = "growth",
                  refinement: bool = False) -> Point:
    """Load and validate the case of one point; an invalid case gives a Point with ``error`` set."""
    overrides = point_overrides(values, base_overrides)
    try:
        case = load_case(path, overrides, text=text)
    except KindynError as exc:
        return Point(values, overrides, None, None, str(exc), refinement)
    return Point(values, overrides, point_identity(case, method), case, "", refinement)


def resolve_points(path, text: str, spec, base_overrides=()) -> list[Point]:
    """Every listed point of ``spec`` with its resolved case (see :func:`resolve_point`)."""
    return [resolve_point(path, text, values, base_overrides, spec.method) for values in combinations(spec)]


def unique_by_identity(points) -> list[Point]:
    """Drop later points whose valid case repeats an earlier one (they would share one record)."""
    seen, out = set(), []
    for p in points:
        if p.identity is not None:
            if p.identity in seen:
                continue
            seen.add(p.identity)
        out.append(p)
    return out
