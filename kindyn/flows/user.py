"""User-defined flows: formulas in the case, a Python function the case names, a netCDF file.

Three flow types (case keys in brackets; all take ``U``, ``k_f``, ``mean_flow``, ``divergence``,
``divergence_tolerance``)::

    [flow] type = "formula"        ux, uy, uz = "..." ; [flow.parameters] A = 1.0 ... ; period
    [flow] type = "callable"       function = "module:function" | "path/file.py:function" ;
                                   [flow.parameters] (passed as keywords) ; steady ; period
    [flow] type = "velocity-file"  file = "path.nc" ; variables ; ends = "hold" | "loop" ; loop_period

* Formulas are parsed by the whitelisted evaluator :mod:`kindyn.flows.formula` (no eval/exec);
  the flow is steady when no component uses ``t`` and z-independent when none uses ``z``.
* A callable is imported only because the case names it; it is called as
  ``f(x, y, z, t, **parameters)`` with broadcastable coordinate arrays and returns three real
  components (arrays broadcastable to the coordinates, or one ``(3, ...)`` array; complex values
  are refused, not cast). A relative file path is taken from the case file's folder.
  ``steady = true`` lets the run sample it once (checked). Importing and calling it go through
  :mod:`kindyn.flows.user_code` (its prints go to stderr; an exception or ``sys.exit`` is one line).
* The velocity file (format in :mod:`kindyn.flows.velocity_file`) is resampled spectrally to the
  run's grid and, for a time series, interpolated linearly in time (see there).

Every user flow is checked before a run (:mod:`kindyn.flows.checks`): components of the right
shape, finite values, periodicity at the box faces (formula, callable), energy inside the 2/3-rule
band, that the grid's samples are the flow (formula, callable: :mod:`kindyn.flows.aliasing`
compares the interpolant with the flow between the grid points), no uniform part unless
``mean_flow = "allow"``, and relative divergence ``||div u||/||grad u|| <= divergence_tolerance``
(default 1e-6); ``divergence = "project"`` replaces the flow by its solenoidal part instead (Leray
projection on the grid at every evaluation; the uniform part is kept). Time-dependent flows are
checked at :data:`CHECK_TIMES` (and a third of the period when one is declared); a formula that
uses ``t`` or a callable with ``steady = false`` (the default) must declare ``period = P``
(checked: ``u(t + P) = u(t)``) or ``period = "none"``. A failure later in a run is reported as
:class:`~kindyn.errors.FlowError`.

Scales ``U`` and ``k_f`` (the Rm rule, :mod:`kindyn.flows.scales`): the case's ``flow.U``,
``flow.k_f`` (required when ``magnetic.Rm`` is given); with ``magnetic.eta``, measured when absent.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from kindyn.errors import FlowError, ParameterError
from kindyn.flows import checks, user_code
from kindyn.flows.aliasing import check_aliasing
from kindyn.flows.formula import FormulaError, parse_formula
from kindyn.flows.gridded import grid_from_hat, hat_from_grid, is_box_grid, values_at
from kindyn.flows.scales import resolve_scales, rms_speed

CHECK_TIMES = (0.0, 0.5, 2.0)
COMMON_KEYS = ("U", "k_f", "mean_flow", "divergence", "divergence_tolerance")


class _Shape:
    """A stand-in box with only a ``shape`` (for :func:`checks.grid_values` off the grid)."""

    def __init__(self, shape):
        self.shape = tuple(shape)


class SampledVelocity:
    """Wraps ``raw(x, y, z, t) -> components`` with checks, projection and a steady-flow cache."""

    def __init__(self, raw, box, steady: bool, project: bool, key: str, value, what: str):
        self.raw, self.box, self.steady, self.project = raw, box, steady, project
        self.key, self.value, self.what = key, value, what
        self._cache: dict = {}

    def call(self, x, y, z, t):
        with np.errstate(all="ignore"):
            return user_code.call(self.raw, self.what, t, x, y, z, t)

    def evaluate(self, x, y, z, t) -> np.ndarray:
        """The raw flow as an array ``(3, *broadcast shape)`` at any broadcastable coordinates."""
        shape = np.broadcast_shapes(*(np.shape(c) for c in (x, y, z)))
        return checks.grid_values(self.call(x, y, z, t), _Shape(shape), self.key, self.value, t)

    def grid(self, t: float) -> np.ndarray:
        x, y, z = self.box.coordinates
        return checks.grid_values(self.call(x, y, z, t), self.box, self.key, self.value, t)

    def projected_hat(self, t: float) -> np.ndarray:
        return checks.project_solenoidal(hat_from_grid(self.grid(t)), self.box)

    def fourier_coefficients(self, t: float) -> np.ndarray | None:
        """Half-grid coefficients of the projected (solenoidal) velocity; ``None`` when the flow is used
        as given (a layout then evaluates it on its own points)."""
        if not self.project:
            return None
        u_hat = self._cache["hat"] if self.steady and "hat" in self._cache else self.projected_hat(t)
        if self.steady:
            self._cache["hat"] = u_hat
        return u_hat

    def velocity(self, x, y, z, t):
        on_grid = is_box_grid(self.box, x, y, z)
        if self.steady and "grid" in self._cache and on_grid:
            return tuple(self._cache["grid"])
        if not self.project:
            if not on_grid:
                return self.call(x, y, z, t)
            u = self.grid(t)
        else:
            u_hat = self._cache["hat"] if self.steady and "hat" in self._cache else self.projected_hat(t)
            if self.steady:
                self._cache["hat"] = u_hat
            if not on_grid:
                return values_at(u_hat, self.box, x, y, z)
            u = grid_from_hat(u_hat, self.box.grid)
        if self.steady:
            self._cache["grid"] = u
        return tuple(u)

    def _grid_checked(self, t: float) -> np.ndarray:
        try:
            return self.grid(t)
        except FlowError as exc:
            raise ParameterError(self.key, self.value, f"a flow that evaluates on the grid ({exc})") from None

    def check(self, times, divergence: str, tolerance: float, mean_flow: str, mean_given,
              period: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Run every check at ``times`` (and of the declared ``period``); return the raw and the used
        (projected when asked) coefficients at the first time."""
        first = None
        for t in times:
            u = self._grid_checked(t)
            checks.check_finite(u, self.box, self.key, self.value, t)
            try:
                checks.check_periodic(self.call, self.box, self.key, self.value, t, float(np.max(np.abs(u))))
                check_aliasing(self.evaluate, u, self.box, t)
                raw_hat = hat_from_grid(u)
                u_hat = checks.check_coefficients(raw_hat, self.box, self.key, self.value, t, divergence, tolerance)
            except FlowError as exc:
                raise ParameterError(self.key, self.value, f"a flow that evaluates off the grid ({exc})") from None
            checks.check_mean_flow(raw_hat, self.box, t, mean_flow, mean_given)
            if first is None:
                first = (raw_hat, u_hat)
        if period is not None:
            scale = float(np.max(np.abs(grid_from_hat(first[0], self.box.grid))))
            checks.check_period(self._grid_checked, period, scale)
        return first


def largest_change(sampler: SampledVelocity) -> float:
    """``max |u(t) - u(0)|`` over :data:`CHECK_TIMES` (0 for a flow that does not depend on t there)."""
    u0 = sampler._grid_checked(0.0)
    return max(float(np.max(np.abs(sampler._grid_checked(t) - u0))) for t in CHECK_TIMES[1:])


def unknown_keys(params: dict, allowed, flow_type: str) -> None:
    for key, value in params.items():
        if key not in allowed:
            raise ParameterError(key, value, f"a parameter of the {flow_type} flow: " + ", ".join(allowed))


def optional_positive(params: dict, key: str):
    value = params.get(key)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not (value > 0 and math.isfinite(value)):
        raise ParameterError(key, value, "a positive number")
    return float(value)


def numeric_parameters(params: dict) -> dict:
    values = params.get("parameters", {})
    if not isinstance(values, dict):
        raise ParameterError("parameters", values, "a table of named numbers, e.g. [flow.parameters] A = 1.0")
    for name, value in values.items():
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise ParameterError(f"parameters.{name}", value, "a finite number")
    return {name: float(value) for name, value in values.items()}


def check_times(steady: bool, period) -> tuple[float, ...]:
    if steady:
        return (0.0,)
    return CHECK_TIMES + ((period / 3.0,) if period else ())


# --- formula flows -------------------------------------------------------------------------------

FORMULA_KEYS = ("ux", "uy", "uz", "parameters", "period") + COMMON_KEYS


def _common(params: dict):
    """``(divergence, tolerance, mean_flow, period, aperiodic)`` from the keys every user flow has."""
    divergence, tolerance = checks.divergence_options(dict(params))
    period, aperiodic = checks.period_option(params)
    return divergence, tolerance, checks.mean_flow_option(params), period, aperiodic


@dataclass(frozen=True)
class FormulaFlow:
    """``u`` written as three formulas in the case (see the module docstring)."""

    ux: str
    uy: str
    uz: str
    parameters: dict
    speed: float
    wavenumber: float
    steady: bool
    z_independent: bool
    period: float | None
    divergence: str
    sampler: SampledVelocity = field(repr=False, compare=False)
    scale_rule: str = ""
    measured_scales: tuple = ()
    u_rms: float = math.nan

    @classmethod
    def from_case(cls, params: dict, box, case_dir="."):
        unknown_keys(params, FORMULA_KEYS, "formula")
        values = numeric_parameters(params)
        formulas, used = [], set()
        for key in ("ux", "uy", "uz"):
            text = params.get(key)
            if text is None:
                raise ParameterError(key, "<missing>", f"a formula for u_{key[1]} (write \"0\" for none)")
            try:
                formula = parse_formula(text, values)
            except FormulaError as exc:
                raise ParameterError(key, text, f"a formula in kindyn's grammar ({exc})") from None
            formulas.append(formula)
            used |= formula.coordinates()
        steady = "t" not in used
        divergence, tolerance, mean_flow, period, aperiodic = _common(params)

        def raw(x, y, z, t):
            return tuple(f.evaluate(x, y, z, t, values) for f in formulas)

        sampler = SampledVelocity(raw, box, steady, divergence == "project", "ux, uy, uz",
                                  "; ".join(params[k] for k in ("ux", "uy", "uz")), "formula")
        period = None if steady else period
        _, u_hat = sampler.check(check_times(steady, period), divergence, tolerance, mean_flow,
                                 params.get("mean_flow"), period)
        checks.require_time_declaration(steady, period, aperiodic, "its formulas use t", None)
        U, k_f, rule, measured = resolve_scales(params, u_hat, box, steady=steady)
        return cls(params["ux"], params["uy"], params["uz"], values, U, k_f, steady, "z" not in used,
                   period, divergence, sampler, rule, measured, rms_speed(u_hat, box))

    def velocity(self, x, y, z, t):
        return self.sampler.velocity(x, y, z, t)

    def fourier_coefficients(self, t: float):
        return self.sampler.fourier_coefficients(t)

    def check_box(self, box) -> None:
        _same_box(self.sampler.box, box)


# --- callable flows ------------------------------------------------------------------------------

CALLABLE_KEYS = ("function", "parameters", "steady", "period") + COMMON_KEYS
load_function = user_code.load_function


@dataclass(frozen=True)
class CallableFlow:
    """``u = f(x, y, z, t, **parameters)`` for a Python function named in the case."""

    function: str
    parameters: dict
    speed: float
    wavenumber: float
    steady: bool
    period: float | None
    divergence: str
    sampler: SampledVelocity = field(repr=False, compare=False)
    scale_rule: str = ""
    measured_scales: tuple = ()
    u_rms: float = math.nan
    z_independent = False

    @classmethod
    def from_case(cls, params: dict, box, case_dir="."):
        unknown_keys(params, CALLABLE_KEYS, "callable")
        values = numeric_parameters(params)
        spec = params.get("function")
        steady = params.get("steady", False)
        if not isinstance(steady, bool):
            raise ParameterError("steady", steady, "true or false")
        divergence, tolerance, mean_flow, period, aperiodic = _common(params)
        # a Python callable object itself (kindyn.load_case(..., flow=f)); text names are imported
        function = spec if callable(spec) else load_function(spec, case_dir)

        def raw(x, y, z, t):
            return function(x, y, z, t, **values)

        sampler = SampledVelocity(raw, box, False, divergence == "project", "function", spec,
                                  f"function {spec}")
        period = None if steady else period
        _, u_hat = sampler.check(check_times(steady, period), divergence, tolerance, mean_flow,
                                 params.get("mean_flow"), period)
        if steady:
            _check_declared_steady(sampler)
            sampler.steady = True
        elif period is None and not aperiodic:
            checks.require_time_declaration(False, None, False, "a callable with steady = false, the default",
                                            largest_change(sampler))
        U, k_f, rule, measured = resolve_scales(params, u_hat, box, steady=steady)
        return cls(spec, values, U, k_f, steady, period, divergence, sampler, rule, measured,
                   rms_speed(u_hat, box))

    def velocity(self, x, y, z, t):
        return self.sampler.velocity(x, y, z, t)

    def fourier_coefficients(self, t: float):
        return self.sampler.fourier_coefficients(t)

    def check_box(self, box) -> None:
        _same_box(self.sampler.box, box)


def _check_declared_steady(sampler: SampledVelocity) -> None:
    u0 = sampler._grid_checked(0.0)
    for t in CHECK_TIMES[1:]:
        change = float(np.max(np.abs(sampler._grid_checked(t) - u0)))
        if change > 1e-12 * max(float(np.max(np.abs(u0))), 1e-300):
            raise ParameterError("steady", True, f"a function that does not depend on t (u changes by up to "
                                 f"{change:.3g} between t = 0 and t = {t:g}); set steady = false")


def _same_box(own, box) -> None:
    if own.lengths != box.lengths or own.grid != box.grid:
        raise ParameterError("grid", list(box.grid), f"the grid the flow was built and checked on {list(own.grid)}")
