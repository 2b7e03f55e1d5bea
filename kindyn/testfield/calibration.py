"""All test-field results of one case: alpha, alpha(K), eta(K) with SOCA, errors, fits, closure.

Data flow: case -> :class:`~kindyn.testfield.settings.TestFieldPlan` -> direct steady solves
(:mod:`.steady`) or time integration (:mod:`.averaging`) -> tensors (:mod:`.extraction`) ->
:class:`TestFieldResult`. Output files are written by the caller (:mod:`kindyn.output`).

Array layout of the result: ``alpha`` is ``3 x 3`` (row = EMF component i, column = uniform test
field j); ``alpha_K``/``eta_K`` are ``(nK, 3, 2)`` (row i = x, y, z; column = the two components
perpendicular to the averaging axis, in x, y, z order). With ``all_directions`` the other two
averaging directions are ``alpha_K_x``, ``eta_K_y``, ... (same shapes; names from
:func:`~kindyn.testfield.full_set.planar_name`), and :attr:`TestFieldResult.full_set` holds
``beta_ijk`` and Rädler's decomposition (:mod:`.full_set`). Errors have the same shapes: standard
errors from block averages (time-dependent flows), the last change (time-stepped steady flows),
or ``nan`` for direct steady solves (exact up to the solver residual, which is reported).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from kindyn.errors import CaseError, NumericalError
from kindyn.testfield import steady
from kindyn.testfield.averaging import ProblemGroup, integrate, time_settings
from kindyn.testfield.extraction import (alpha_from_uniform, beta_from_eta, coefficients_from_profiles,
                                         horizontal_parts, planar_tests)
from kindyn.testfield.fields import uniform_test_fields
from kindyn.testfield.full_set import block_estimates, derive_both, findings, planar_name
from kindyn.testfield.kernels import fit_lorentzian
from kindyn.array_kernels import make_kernels
from kindyn.assemble import make_box_layout, transform_settings
from kindyn.layout import BoxLayout
from kindyn.testfield.problems import TestProblems
from kindyn.testfield.resolution import resolution_check, solution_cutoff_ratio
from kindyn.testfield.settings import plan_from_case

SOCA_CAUTION = ("SOCA (second-order correlation approximation) is valid only at small Rm or short correlation "
                "time; compare alpha_soca with alpha before using it")
RESET_CAUTION = ("above dynamo onset the test solutions grow, and the coefficients depend on the reset "
                 "interval (testfield.reset_interval)")
SIGNS = ("Ebar_i = alpha_ij Bbar_j + beta_ijk d_k Bbar_j; planar averages: Ebar_i = alpha_ij Bbar_j - "
         "eta_ij (curl Bbar)_j, beta_ijs = -eta_il eps_lsj; row i = EMF component, column j = mean-field "
         "component")
ONSET_MARGIN = 1e-8
UNDER_RESOLVED = "possibly under-resolved"


@dataclass(frozen=True)
class CalibrationProgress:
    """One progress report of a calibration: ``text`` for people (``str()`` of the report), and the
    numbers an ETA needs: for direct solves ``solved`` of ``solves`` test fields, for time stepping the
    simulation ``time`` and the ``worst_ratio`` of the coefficients' error to their tolerance."""

    text: str
    solved: int | None = None
    solves: int | None = None
    time: float | None = None
    worst_ratio: float | None = None

    def __str__(self) -> str:
        return self.text


@dataclass
class TestFieldResult:
    """Everything ``kindyn testfield`` reports (see module docstring for shapes)."""

    axis: int
    modes: tuple
    K: np.ndarray
    method: str
    Rm: float
    eta: float
    speed: float
    k_f: float
    converged: bool
    stop_reason: str
    tensors: dict = field(default_factory=dict)
    errors: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    onset_growth_rates: dict = field(default_factory=dict)
    solver: dict = field(default_factory=dict)
    fits: dict = field(default_factory=dict)
    closure: dict | None = None
    growing: bool = False
    time_outcome: object = None
    directions: tuple = ()
    full_set: dict = field(default_factory=dict)
    full_set_errors: dict = field(default_factory=dict)
    findings: list = field(default_factory=list)
    ensemble: dict | None = None  # ensembles (kindyn.testfield.ensemble): count, seeds, spreads
    resolution: dict = field(default_factory=dict)  # kindyn.testfield.resolution.resolution_check ({} for ensembles)
    members: list | None = None  # ensembles: the realisations' tensors and errors

    __test__ = False

    def __post_init__(self):
        if not self.directions:
            self.directions = (self.axis,)

    def planar_key(self, base: str, axis: int | None = None, soca: bool = False) -> str:
        """The name of the planar tensor ``base`` (``"alpha_K"``, ``"eta_K"``) along ``axis``."""
        return planar_name(base, self.axis if axis is None else axis, self.axis, soca)

    def planar(self, base: str, axis: int | None = None, soca: bool = False, errors: bool = False) -> np.ndarray:
        """``alpha_K`` or ``eta_K`` (``(nK, 3, 2)``) of the averages along ``axis`` (default: the case's)."""
        return (self.errors if errors else self.tensors)[self.planar_key(base, axis, soca)]

    def horizontal(self, soca: bool = False, axis: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """``alpha(K)`` and ``eta_t(K)``: in-plane means of the diagonals (arrays of length nK)."""
        s = self.axis if axis is None else axis
        pairs = [horizontal_parts(a, e, s) for a, e in zip(self.planar("alpha_K", s, soca),
                                                             self.planar("eta_K", s, soca))]
        return np.array([p[0] for p in pairs]), np.array([p[1] for p in pairs])

    def horizontal_errors(self, soca: bool = False, axis: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Errors of :meth:`horizontal` (half the sum of the two diagonal errors: an upper bound)."""
        s = self.axis if axis is None else axis
        pairs = [horizontal_parts(a, e, s) for a, e in zip(self.planar("alpha_K", s, soca, errors=True),
                                                             self.planar("eta_K", s, soca, errors=True))]
        return np.array([p[0] for p in pairs]), np.array([p[1] for p in pairs])

    def uniform_alpha(self, soca: bool = False) -> float | None:
        """``(alpha_pp + alpha_qq)/2`` of the uniform-field alpha (the K = 0 value of :meth:`horizontal`),
        or None when the uniform test fields were not computed (or gave no finite value)."""
        alpha = self.tensors.get("alpha_soca" if soca else "alpha")
        if alpha is None:
            return None
        perp = [j for j in range(3) if j != self.axis]
        value = 0.5 * float(alpha[perp[0], perp[0]] + alpha[perp[1], perp[1]])
        return value if math.isfinite(value) else None

    def beta(self, soca: bool = False, axis: int | None = None) -> np.ndarray:
        """Planar ``beta_ijs`` ``(nK, 3, 2)`` along ``axis`` (default: the case's)."""
        s = self.axis if axis is None else axis
        return np.stack([beta_from_eta(e, s) for e in self.planar("eta_K", s, soca)])


def _layout(case) -> BoxLayout:
    """The box layout of the test problems (serial or distributed, as launched): always double precision."""
    return make_box_layout(case.box, transform_settings(case.numerics, precision="double"), case.numerics)


def _planar_coefficients(groups_of_fields, s, axis: int | None = None, primary: int | None = None):
    """``coefficients(full, soca) -> {alpha_K.., eta_K..}`` for the planar tests along ``axis`` (names of
    :func:`planar_name`; ``axis = primary`` or None: ``alpha_K``, ``eta_K``)."""
    def coefficients(full, soca):
        out = {}
        for flag, emf in ((False, full), (True, soca)):
            alphas, etas = [], []
            for g, fields in enumerate(groups_of_fields):
                a, e = coefficients_from_profiles(emf[4 * g:4 * g + 4], fields, s)
                alphas.append(a)
                etas.append(e)
            out[planar_name("alpha_K", axis, primary, flag)] = np.stack(alphas)
            out[planar_name("eta_K", axis, primary, flag)] = np.stack(etas)
        return out
    return coefficients


def _planar_jobs(plan):
    """``(name, axis, field sets)`` of every averaging direction (the case's axis is ``"planar"``)."""
    return [("planar" if d == plan.axis else f"planar_{'xyz'[d]}", d,
             planar_tests(d, plan.modes_along(d), plan.wavenumbers)) for d in plan.directions]


def _uniform_coefficients(full, soca):
    return {"alpha": alpha_from_uniform(full), "alpha_soca": alpha_from_uniform(soca)}


def _direct(case, plan, result: TestFieldResult, progress) -> None:
    box, flow, eta = case.box, case.flow, case.eta
    layout = _layout(case)
    kernels = make_kernels(layout.transforms.array_kernels, layout.transforms.threads, layout.real_dtype)
    jobs = []
    if plan.uniform:
        jobs.append(("uniform", None, [uniform_test_fields()]))
    jobs += _planar_jobs(plan)
    if plan.onset_check:
        for name, axis, field_sets in jobs:
            sources = []
            for f in (f for fields in field_sets for f in fields):
                op = TestProblems(layout, flow, eta, [f], axis, kernels=kernels)
                sources.append(op.source(0.0, np.empty(op.shape, dtype=complex)))
            rate = steady.leading_growth_rate(op, sources)
            result.onset_growth_rates[name] = rate
            if math.isfinite(rate) and rate > -ONSET_MARGIN * flow.speed * flow.wavenumber:
                raise CaseError(case.path, "testfield.method", case.testfield.method,
                                f"\"time\" with a testfield.reset_interval: the {name} test problems have a growing "
                                f"homogeneous mode (growth rate {rate:.4g} >= 0, above dynamo onset), so the steady "
                                "solution is not their long-time limit")
            if not math.isfinite(rate):
                result.notes.append(f"onset check for the {name} test problems did not converge (ARPACK)")
    residuals, ratios = [], []
    solves = sum(len(fields) for _, _, field_sets in jobs for fields in field_sets)
    for name, axis, field_sets in jobs:
        emf_full, emf_soca = [], []
        for fields in field_sets:
            for f in fields:
                op = TestProblems(layout, flow, eta, [f], axis, kernels=kernels)
                b_soca = steady.soca_solution(op)
                b_full, info = steady.full_solution(op, plan.solver_tolerance)
                residuals.append(info["residual"])
                ratios.append(solution_cutoff_ratio(b_full, layout, flow))
                emf_full.append(op.emf(0.0, b_full)[0])
                emf_soca.append(op.emf(0.0, b_soca)[0])
                if progress:
                    progress(CalibrationProgress(
                        f"{f.label}: GMRES residual {info['residual']:.2g}, {info['iterations']} applications",
                        solved=len(residuals), solves=solves))
        full, soca = np.stack(emf_full), np.stack(emf_soca)
        if name == "uniform":
            values = _uniform_coefficients(full, soca)
        else:
            values = _planar_coefficients(field_sets, box.axis(axis), axis, plan.axis)(full, soca)
        result.tensors.update(values)
        result.errors.update({k: np.full_like(v, np.nan) for k, v in values.items()})
    result.solver = {"kind": "direct steady solve: SOCA by spectral division, full by GMRES",
                     "max_relative_residual": max(residuals) if residuals else 0.0}
    result.converged, result.stop_reason = True, "direct steady solve"
    _resolution(case, layout, result, max(ratios, default=0.0))


def _time(case, plan, result: TestFieldResult, progress) -> None:
    box, flow, eta = case.box, case.flow, case.eta
    layout = _layout(case)
    kernels = make_kernels(layout.transforms.array_kernels, layout.transforms.threads, layout.real_dtype)
    settings = time_settings(flow, layout, eta, plan, case.run.cfl, case.run.time_step, case.run.scheme, case.path)
    groups = []
    if plan.uniform:
        groups.append(ProblemGroup(layout, flow, eta, uniform_test_fields(), None, case.run.scheme,
                                   _uniform_coefficients, kernels))
    for _, axis, field_sets in _planar_jobs(plan):
        flat = [f for fields in field_sets for f in fields]
        groups.append(ProblemGroup(layout, flow, eta, flat, axis, case.run.scheme,
                                   _planar_coefficients(field_sets, box.axis(axis), axis, plan.axis), kernels))
    scales = {"alpha": flow.speed, "eta": flow.speed / flow.wavenumber}
    report = (lambda t, worst: progress(CalibrationProgress(f"t = {t:10.4g}   worst error / tolerance = {worst:.3g}",
                                                            time=t, worst_ratio=worst))) if progress else None
    outcome = integrate(groups, settings, scales, plan.tolerance, report)
    result.tensors.update(outcome.estimates)
    result.errors.update(outcome.errors)
    result.converged, result.stop_reason = outcome.converged, outcome.stop_reason
    result.growing, result.time_outcome = outcome.growing, outcome
    result.solver = {"kind": f"time stepping ({case.run.scheme}, integrating factor), {settings.mode} over blocks",
                     "dt": settings.dt, "block_length": settings.block_length,
                     "reset_interval": settings.reset_interval, "settle_time": settings.settle_time,
                     "time": outcome.time, "steps": outcome.steps, "wall_seconds": outcome.wall_seconds,
                     "test_solution_growth_rate": outcome.growth_rate}
    if outcome.growing:
        result.notes.append(RESET_CAUTION + " (growing test solutions were detected)")
    elif settings.reset_interval is not None:
        result.notes.append("results can depend on the reset interval when the flow is above dynamo onset")
    _resolution(case, layout, result, outcome.cutoff_ratio)


def _resolution(case, layout, result: TestFieldResult, ratio: float) -> None:
    """Both resolution criteria of :mod:`kindyn.testfield.resolution` (the test solutions' spectrum at
    the cut-off, ``ratio``, and the diffusive scale): into ``result.resolution`` and, when either trips,
    a caution in ``result.notes`` (printed by ``kindyn testfield``, in its JSON ``cautions`` and the
    netCDF ``caution`` attribute)."""
    result.resolution = resolution_check(case, layout, ratio)
    if result.resolution["resolution_warning"]:
        result.notes.append(f"{UNDER_RESOLVED}: {result.resolution['resolution_caution']}")


def calibrate(case, progress=None, direct_run=None) -> TestFieldResult:
    """Run the test-field method for ``case`` (see module docstring).

    ``progress(report)`` receives :class:`CalibrationProgress` reports (``str(report)`` is the line); ``direct_run(case) -> (rate, error, b_hat)`` is the
    growth-rate run of the closure check (the command passes one built on :func:`kindyn.run.run_growth`;
    this module does not import the run layer). Without it the closure check is skipped with a note.
    """
    plan = plan_from_case(case)
    flow = case.flow
    result = TestFieldResult(plan.axis, plan.modes, np.array(plan.wavenumbers), plan.method, case.Rm, case.eta,
                             flow.speed, flow.wavenumber, False, "", directions=plan.directions)
    result.notes.append(SOCA_CAUTION)
    if plan.method == "direct":
        _direct(case, plan, result, progress)
    else:
        _time(case, plan, result, progress)
    _full_set(result, plan)
    for soca in (False, True):
        a, e = result.horizontal(soca)
        sfx = "_soca" if soca else ""
        result.fits["alpha" + sfx] = fit_lorentzian(result.K, a, flow.wavenumber, result.uniform_alpha(soca),
                                                    "in-plane mean of the uniform-field alpha").as_dict()
        result.fits["eta_t" + sfx] = fit_lorentzian(result.K, e, flow.wavenumber).as_dict()
    if plan.closure and direct_run is None:
        result.notes.append("closure check skipped: no direct run was supplied")
    elif plan.closure:
        result.closure = _closure(case, plan, result, direct_run)
    return result


def _full_set(result: TestFieldResult, plan) -> None:
    """beta_ijk, Rädler's decomposition and its errors (:mod:`.full_set`), and the findings."""
    result.full_set = derive_both(result.tensors, plan.directions, plan.axis)
    outcome = result.time_outcome
    if outcome is not None:
        result.full_set_errors = block_estimates(outcome.record, outcome.settings.mode, plan.directions, plan.axis)
    if not result.full_set_errors:
        result.full_set_errors = {k: np.full_like(np.asarray(v, float), np.nan) for k, v in result.full_set.items()}
    result.findings = findings(result)


def _closure(case, plan, result, direct_run) -> dict:
    from kindyn.testfield.closure import box_scale_mean_share, closure_report

    K1 = 2 * math.pi / case.box.lengths[plan.axis]
    if 1 not in plan.modes:
        raise CaseError(case.path, "testfield.modes", list(plan.modes),
                        "a list containing the box-scale mode 1 when testfield.closure = true")
    i = plan.modes.index(1)
    a, e = result.horizontal()
    try:
        rate, error, b_hat = direct_run(case)
    except NumericalError as exc:
        rate, error, b_hat = math.nan, math.nan, None
        result.notes.append(f"closure check: the direct run failed ({exc})")
    share = box_scale_mean_share(b_hat, _layout(case), plan.axis) if b_hat is not None else None
    return closure_report(float(a[i]), float(e[i]), result.tensors["alpha_K"][i], result.tensors["eta_K"][i],
                          case.eta, K1, plan.axis, case.flow.wavenumber, rate, error, share)
