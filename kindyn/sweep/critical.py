"""Critical values: where the growth rate changes sign along a swept parameter, and dynamo windows.

Along one line of a sweep (the critical key ``x`` varies, every other swept key is fixed) the
points ``(x_i, gamma_i +- sigma_i)`` are sorted by ``x``. Between neighbours of opposite sign the
critical value is the root of the linear interpolant::

    x* = x0 - g0 (x1 - x0) / (g1 - g0)

Its uncertainty combines

* the propagated growth-rate errors, ``dx*/dg0 = -g1 h/(g1-g0)^2``, ``dx*/dg1 = g0 h/(g1-g0)^2``
  with ``h = x1 - x0`` (added in quadrature), and
* the interpolation error: the largest shift of the root when a neighbouring point on either side
  is added (quadratic through three points); with no neighbour, the distance to the farther end
  of the bracket,

in quadrature, and is capped at the distance to the farther bracket end when both end signs are
certain (``|g| > sigma``), since the root then lies inside the bracket. When an end's sign is not
certain (``|g| <= sigma``) the sign change itself may not exist: ``sign_certain`` is false, and
reports say "may turn positive/negative" with the growth rates of the bracket ends.

Refinement (``--refine``) places new runs inside every bracket whose end signs are certain and
which is wider than ``refine_width`` times its centre: ``m`` equally spaced interior points per
round (bisection for ``m = 1``; ``m > 1`` uses idle workers), at most ``refine_runs`` per sign
change of the listed sweep. The sign changes are recomputed from all points after every round.

A dynamo window is an interval of ``x`` where ``gamma > 0``: from a sign change where gamma turns
positive (``"opens"``) to the next where it turns negative (``"closes"``); an end outside the
scanned range is reported as ``None``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kindyn.sweep.spec import round_value


@dataclass(frozen=True)
class Crossing:
    """One sign change of gamma between ``bracket[0]`` and ``bracket[1]`` (see module docstring)."""

    value: float
    uncertainty: float
    bracket: tuple[float, float]
    growth_rates: tuple[float, float]
    errors: tuple[float, float]
    direction: str  # "opens": gamma turns positive with increasing x; "closes": turns negative
    sign_certain: bool
    statistical: float = 0.0

    def as_dict(self) -> dict:
        return {"value": self.value, "uncertainty": self.uncertainty, "bracket": list(self.bracket),
                "growth_rates": list(self.growth_rates), "errors": list(self.errors),
                "direction": self.direction, "sign_certain": self.sign_certain}


@dataclass(frozen=True)
class Window:
    """An interval with ``gamma > 0``; ``lower``/``upper`` is ``None`` beyond the scanned ``scan`` range."""

    lower: Crossing | None
    upper: Crossing | None
    scan: tuple[float, float]

    def as_dict(self) -> dict:
        def end(c):
            return None if c is None else {"value": c.value, "uncertainty": c.uncertainty,
                                           "sign_certain": c.sign_certain}
        return {"lower": end(self.lower), "upper": end(self.upper), "scan": list(self.scan)}


def _finite_sorted(x, gamma, error):
    x, gamma, error = (np.asarray(a, float) for a in (x, gamma, error))
    keep = np.isfinite(x) & np.isfinite(gamma)
    x, gamma, error = x[keep], gamma[keep], error[keep]
    error = np.where(np.isfinite(error), np.abs(error), np.inf)
    order = np.argsort(x, kind="stable")
    return x[order], gamma[order], error[order]


def linear_root(x0, x1, g0, g1) -> float:
    return x0 - g0 * (x1 - x0) / (g1 - g0)


def _quadratic_root(xs, gs, lo, hi) -> float | None:
    """The root in ``[lo, hi]`` of the parabola through three points (``None`` if there is none)."""
    coeffs = np.polyfit(np.asarray(xs) - lo, np.asarray(gs), 2)
    roots = np.roots(coeffs)
    real = [r.real + lo for r in roots if abs(r.imag) <= 1e-12 * max(1.0, abs(r.real))]
    inside = [r for r in real if lo - 1e-12 <= r <= hi + 1e-12]
    return inside[0] if len(inside) == 1 else None


def sign_changes(x, gamma, error) -> list[Crossing]:
    """Every sign change of ``gamma(x)`` along one line, located and given an uncertainty.

    ``x``, ``gamma``, ``error``: 1-D sequences of equal length (any order; points with non-finite
    ``x`` or ``gamma`` are ignored, a non-finite error counts as infinite). ``gamma == 0`` counts
    as not growing.
    """
    x, g, s = _finite_sorted(x, gamma, error)
    out = []
    for i in range(len(x) - 1):
        g0, g1 = g[i], g[i + 1]
        if (g0 > 0) == (g1 > 0) or x[i] == x[i + 1]:
            continue
        x0, x1, h = x[i], x[i + 1], x[i + 1] - x[i]
        root = linear_root(x0, x1, g0, g1)
        d0, d1 = -g1 * h / (g1 - g0) ** 2, g0 * h / (g1 - g0) ** 2
        statistical = math.hypot(d0 * s[i], d1 * s[i + 1]) if np.isfinite(s[i] + s[i + 1]) else math.inf
        shifts = []
        for trio in ((i - 1, i, i + 1), (i, i + 1, i + 2)):
            if trio[0] >= 0 and trio[2] < len(x):
                q = _quadratic_root(x[list(trio)], g[list(trio)], x0, x1)
                shifts.append(abs(q - root) if q is not None else max(root - x0, x1 - root))
        farther = max(root - x0, x1 - root)
        interpolation = max(shifts) if shifts else farther
        total = math.hypot(statistical, interpolation)
        certain = bool(abs(g0) > s[i] and abs(g1) > s[i + 1])
        if certain:
            total = min(total, farther)
        out.append(Crossing(float(root), float(total), (float(x0), float(x1)), (float(g0), float(g1)),
                            (float(s[i]), float(s[i + 1])), "opens" if g1 > 0 else "closes", certain,
                            float(statistical)))
    return out


def dynamo_windows(crossings, x, gamma) -> list[Window]:
    """Intervals of ``x`` with ``gamma > 0`` from the ``crossings`` of one line and its points."""
    xs, gs, _ = _finite_sorted(x, gamma, np.zeros(len(x)))
    if xs.size == 0:
        return []
    scan = (float(xs[0]), float(xs[-1]))
    windows, lower, growing = [], None, bool(gs[0] > 0)
    for c in sorted(crossings, key=lambda c: c.value):
        if c.direction == "opens":
            lower, growing = c, True
        else:
            windows.append(Window(lower, c, scan))
            lower, growing = None, False
    if growing:
        windows.append(Window(lower, None, scan))
    return windows


def refinement_values(x, gamma, error, refinement, refine_runs: int, refine_width: float,
                      per_crossing: int = 1) -> list[float]:
    """New values of ``x`` to run next for one line (empty when every sign change is refined enough).

    ``refinement[i]`` tells whether point ``i`` was added by refinement (failed points included,
    with ``gamma = NaN``, so that a failing region is not retried for ever).
    """
    x = np.asarray(x, float)
    refinement = np.asarray(refinement, bool)
    listed = np.sort(x[~refinement])
    present = {round_value(v) for v in x}
    new = []
    for c in sign_changes(x, gamma, error):
        a, b = c.bracket
        if not c.sign_certain or b - a <= refine_width * max(abs(a + b) / 2, 1e-300):
            continue
        below, above = listed[listed <= a], listed[listed >= b]
        lo = below[-1] if below.size else a
        hi = above[0] if above.size else b
        used = int(np.count_nonzero(refinement & (x > lo) & (x < hi)))
        count = min(per_crossing, refine_runs - used)
        for j in range(1, count + 1):
            value = round_value(a + (b - a) * j / (count + 1))
            if value not in present and a < value < b:
                present.add(value)
                new.append(value)
    return new


def group_lines(values: list[dict], key: str) -> dict:
    """``{other swept values (tuple of items): [indices]}`` for the points ``values`` (dicts)."""
    lines: dict = {}
    for i, v in enumerate(values):
        others = tuple((k, _hashable(val)) for k, val in v.items() if k != key)
        lines.setdefault(others, []).append(i)
    return lines


def _hashable(value):
    return tuple(_hashable(v) for v in value) if isinstance(value, (list, tuple)) else value
