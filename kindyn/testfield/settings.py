"""The ``[testfield]`` case section: keys, defaults, meanings, and their check against the box.

The key table :data:`TESTFIELD_KEYS` is registered in :mod:`kindyn.case.sections`; the loader checks
types. :func:`plan_from_case` then checks what needs the box and the flow (test-field wavenumbers
that fit the box and survive dealiasing) and returns a frozen :class:`TestFieldPlan`, raising
:class:`~kindyn.errors.CaseError` with file, key, value and what is expected — before any
computation. Time stepping reuses ``[run] scheme``, ``cfl`` and ``time_step``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from kindyn.case.schema import Key, boolean, list_of, choice, non_negative, positive, positive_integer
from kindyn.errors import CaseError

AXES = ("x", "y", "z")


TESTFIELD_KEYS = {
    "axis": Key(choice(*AXES), "z",
                "averaging axis: mean fields depend on this coordinate only (planar averages over the other two)"),
    "modes": Key(list_of(positive_integer, "whole numbers >= 1"), None,
                 "test-field wavenumbers as mode numbers m along the axis, K = 2 pi m / L_axis (default [1])"),
    "wavenumbers": Key(list_of(positive, "positive numbers"), None,
                       "test-field wavenumbers K (whole multiples of 2 pi / L_axis); give modes or wavenumbers"),
    "uniform": Key(boolean, True, "also solve the three uniform test fields (the full 3x3 alpha, box average)"),
    "method": Key(choice("auto", "direct", "time"), "auto",
                  "auto: direct steady solves for steady flows, time stepping otherwise; "
                  "direct: steady solves (steady flows only); time: time stepping"),
    "reset_interval": Key(positive, None,
                          "time between resets of the test solutions to zero (rounded up to whole blocks); "
                          "default: never reset"),
    "settle_time": Key(non_negative, None,
                       "time after the start and after each reset excluded from averages "
                       "(default 5/(eta k_f^2), at most half the reset interval)"),
    "block_length": Key(positive, None,
                        "averaging block (default: one flow period for periodic flows, else 10/(U k_f)); "
                        "rounded to whole periods for periodic flows"),
    "tolerance": Key(positive, 1e-3,
                     "stop when every standard error (change, for steady flows) is below tolerance * U "
                     "(alpha) and tolerance * U/k_f (eta)"),
    "min_time": Key(non_negative, 0.0, "never stop the time stepping before this time"),
    "max_time": Key(positive, None, "stop the time stepping here even if not converged (default: settle + 200 blocks)"),
    "samples_per_period": Key(positive_integer, 32, "EMF samples per flow period (or per block) for time averages"),
    "solver_tolerance": Key(positive, 1e-11, "relative residual of the iterative steady solve (GMRES)"),
    "onset_check": Key(boolean, True,
                       "before direct steady solves, check that no test problem has a growing homogeneous mode"),
    "closure": Key(boolean, False,
                   "compare the mean-field growth rate at the box scale with a direct run (kindyn run)"),
}


@dataclass(frozen=True)
class TestFieldPlan:
    """What to compute, checked against the box and the flow.

    ``axis`` is 0, 1 or 2; ``modes`` the mode numbers ``m`` of the sinusoidal test fields with
    wavenumbers ``K = 2 pi m / L_axis``; ``method`` is ``"direct"`` or ``"time"`` (resolved).
    """

    axis: int
    modes: tuple[int, ...]
    wavenumbers: tuple[float, ...]
    uniform: bool
    method: str
    reset_interval: float | None
    settle_time: float | None
    block_length: float | None
    tolerance: float
    min_time: float
    max_time: float | None
    samples_per_period: int
    solver_tolerance: float
    onset_check: bool
    closure: bool

    __test__ = False  # not a pytest class

    @property
    def axis_name(self) -> str:
        return AXES[self.axis]

    @property
    def perpendicular(self) -> tuple[int, int]:
        """The two axes perpendicular to the averaging axis, in x, y, z order."""
        return tuple(i for i in range(3) if i != self.axis)


def plan_from_case(case) -> TestFieldPlan:
    """Resolve and check the ``[testfield]`` section of ``case`` (see module docstring)."""
    s, file, box, flow = case.testfield, case.path, case.box, case.flow
    axis = AXES.index(s.axis)
    length = box.lengths[axis]
    base = 2 * math.pi / length
    if s.modes is not None and s.wavenumbers is not None:
        raise CaseError(file, "testfield.wavenumbers", list(s.wavenumbers),
                        "either testfield.modes or testfield.wavenumbers, not both")
    if s.wavenumbers is not None:
        modes = []
        for K in s.wavenumbers:
            m = K / base
            if abs(m - round(m)) > 1e-9 * max(1.0, m):
                raise CaseError(file, "testfield.wavenumbers", list(s.wavenumbers),
                                f"whole multiples of 2*pi/L{s.axis} = {base:.6g} (the box is periodic along {s.axis})")
            modes.append(int(round(m)))
        key, shown = "testfield.wavenumbers", list(s.wavenumbers)
    else:
        modes = list(s.modes) if s.modes is not None else [1]
        key, shown = "testfield.modes", modes
    if len(set(modes)) != len(modes):
        raise CaseError(file, key, shown, "distinct test-field wavenumbers")
    kept = box.max_kept_modes[axis]
    if max(modes) > kept:
        raise CaseError(file, key, shown,
                        f"mode numbers at most {kept} along {s.axis} (grid {box.grid[axis]} keeps |m| < n/3 "
                        "after dealiasing); use a finer grid")
    modes = sorted(modes)
    steady = bool(flow.steady)
    method = s.method
    if method == "auto":
        method = "direct" if steady else "time"
    if method == "direct" and not steady:
        raise CaseError(file, "testfield.method", s.method,
                        f"\"time\" or \"auto\": the {case.flow_type} flow is time-dependent, so there is no steady problem")
    if s.reset_interval is not None and method == "direct":
        raise CaseError(file, "testfield.reset_interval", s.reset_interval,
                        "no reset interval with direct steady solves (set testfield.method = \"time\")")
    if s.max_time is not None and s.min_time > s.max_time:
        raise CaseError(file, "testfield.min_time", s.min_time, f"a time not above testfield.max_time = {s.max_time}")
    return TestFieldPlan(axis, tuple(modes), tuple(m * base for m in modes), s.uniform, method, s.reset_interval,
                         s.settle_time, s.block_length, s.tolerance, s.min_time, s.max_time, s.samples_per_period,
                         s.solver_tolerance, s.onset_check, s.closure)
