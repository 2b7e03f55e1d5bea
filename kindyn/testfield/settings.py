"""The ``[testfield]`` case section checked against the box.

The keys, their types and defaults are :class:`~kindyn.case.testfield_section.TestfieldConfig` in
the case package (the loader checks types there). :func:`plan_from_case` then checks what needs the
box and the flow (test-field wavenumbers that fit the box and survive dealiasing) and returns a
frozen :class:`TestFieldPlan`, raising :class:`~kindyn.errors.CaseError` with file, key, value and
what is expected — before any computation. Time stepping reuses ``[run] scheme``, ``cfl`` and
``time_step``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from kindyn.case.ranges import check_seed_span
from kindyn.case.testfield_section import AXES, TESTFIELD_KEYS, TestfieldConfig
from kindyn.errors import CaseError
from kindyn.transforms.launch import launched_processes

__all__ = ["AXES", "TESTFIELD_KEYS", "TestFieldPlan", "TestfieldConfig", "plan_from_case"]


@dataclass(frozen=True)
class TestFieldPlan:
    """What to compute, checked against the box and the flow.

    ``axis`` is 0, 1 or 2; ``modes`` the mode numbers ``m`` of the sinusoidal test fields with
    wavenumbers ``K = 2 pi m / L_axis``; ``method`` is ``"direct"`` or ``"time"`` (resolved).
    ``directions`` are the averaging axes computed: ``(axis,)``, or ``(0, 1, 2)`` with
    ``all_directions``; ``direction_modes[d]`` are the mode numbers of the same ``wavenumbers`` along
    ``directions[d]`` (``K L_d / (2 pi)``).
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
    directions: tuple[int, ...] = ()
    direction_modes: tuple[tuple[int, ...], ...] = ()
    realisations: int = 1
    closure_coupling: int = 2

    __test__ = False  # not a pytest class

    @property
    def axis_name(self) -> str:
        return AXES[self.axis]

    @property
    def perpendicular(self) -> tuple[int, int]:
        """The two axes perpendicular to the averaging axis, in x, y, z order."""
        return tuple(i for i in range(3) if i != self.axis)

    def modes_along(self, axis: int) -> tuple[int, ...]:
        """Mode numbers of :attr:`wavenumbers` along ``axis`` (one of :attr:`directions`)."""
        return self.direction_modes[self.directions.index(axis)]


def plan_from_case(case) -> TestFieldPlan:
    """Resolve and check the ``[testfield]`` section of ``case`` (see module docstring)."""
    s: TestfieldConfig = case.testfield
    file, box, flow = case.path, case.box, case.flow
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
    processes = launched_processes()
    if method == "auto":
        method = "direct" if steady and processes == 1 else "time"
    if method == "direct" and processes > 1:
        raise CaseError(file, "testfield.method", s.method,
                        f"\"time\" or \"auto\" on {processes} MPI processes: the direct steady solves run in one "
                        "process (run them without mpiexec, or step the test problems in time)")
    if method == "direct" and not steady:
        raise CaseError(file, "testfield.method", s.method,
                        f"\"time\" or \"auto\": the {case.flow_type} flow is time-dependent, so there is no steady problem")
    if s.reset_interval is not None and method == "direct":
        raise CaseError(file, "testfield.reset_interval", s.reset_interval,
                        "no reset interval with direct steady solves (set testfield.method = \"time\")")
    if s.max_time is not None and s.min_time > s.max_time:
        raise CaseError(file, "testfield.min_time", s.min_time, f"a time not above testfield.max_time = {s.max_time}")
    if method == "time" and s.max_time is not None and s.settle_time is not None and s.settle_time >= s.max_time:
        raise CaseError(file, "testfield.settle_time", s.settle_time,
                        f"a time below testfield.max_time = {s.max_time:g}: no averaging block would follow it")
    wavenumbers = tuple(m * base for m in modes)
    directions, direction_modes = (axis,), (tuple(modes),)
    if s.all_directions:
        directions = (0, 1, 2)
        direction_modes = tuple(tuple(modes) if d == axis else _modes_along(case, d, wavenumbers, key, shown)
                                for d in directions)
    if s.realisations > 1:
        seed = getattr(flow, "seed", None)
        if isinstance(seed, bool) or not isinstance(seed, int):
            raise CaseError(file, "testfield.realisations", s.realisations,
                            f"1 for the {case.flow_type} flow: an ensemble needs a random flow with a seed "
                            "(e.g. \"random-helical\")")
        check_seed_span(file, seed, s.realisations, f"testfield.realisations = {s.realisations}")
    return TestFieldPlan(axis, tuple(modes), wavenumbers, s.uniform, method, s.reset_interval,
                         s.settle_time, s.block_length, s.tolerance, s.min_time, s.max_time, s.samples_per_period,
                         s.solver_tolerance, s.onset_check, s.closure, directions, direction_modes,
                         s.realisations, s.closure_coupling)


def _modes_along(case, axis: int, wavenumbers, key: str, shown) -> tuple[int, ...]:
    """Mode numbers of ``wavenumbers`` along ``axis`` (all_directions: the same K on every axis)."""
    box, name = case.box, AXES[axis]
    base = 2 * math.pi / box.lengths[axis]
    out = []
    for K in wavenumbers:
        m = K / base
        if abs(m - round(m)) > 1e-9 * max(1.0, m):
            raise CaseError(case.path, key, shown,
                            f"with testfield.all_directions = true, wavenumbers that are whole multiples of "
                            f"2*pi/L on every axis (K = {K:.6g} is not one of 2*pi/L{name} = {base:.6g})")
        m = int(round(m))
        if m > box.max_kept_modes[axis]:
            raise CaseError(case.path, key, shown,
                            f"with testfield.all_directions = true, K = {K:.6g} kept on every axis: along {name} it is "
                            f"mode {m} > {box.max_kept_modes[axis]} (grid {box.grid[axis]}); use a finer grid")
        out.append(m)
    return tuple(out)
