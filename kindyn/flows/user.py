"""User-defined flows: formulas in the case, a Python function the case names, a netCDF file.

Three flow types (case keys in brackets; all take ``U``, ``k_f``, ``divergence``,
``divergence_tolerance``)::

    [flow] type = "formula"        ux, uy, uz = "..." ; [flow.parameters] A = 1.0 ... ; period
    [flow] type = "callable"       function = "module:function" | "path/file.py:function" ;
                                   [flow.parameters] (passed as keywords) ; steady ; period
    [flow] type = "velocity-file"  file = "path.nc" ; variables ; ends = "hold" | "loop" ; loop_period

* Formulas are parsed by the whitelisted evaluator :mod:`kindyn.flows.formula` (no eval/exec);
  the flow is steady when no component uses ``t`` and z-independent when none uses ``z``.
* A callable is imported only because the case names it; it is called as
  ``f(x, y, z, t, **parameters)`` with broadcastable coordinate arrays and returns three components
  (arrays broadcastable to the coordinates, or one ``(3, ...)`` array). A relative file path is
  taken from the case file's folder. ``steady = true`` lets the run sample it once (checked).
* The velocity file (format in :mod:`kindyn.flows.velocity_file`) is resampled spectrally to the
  run's grid and, for a time series, interpolated linearly in time (see there).

Every user flow is checked before a run (:mod:`kindyn.flows.checks`): components of the right
shape, finite values, periodicity at the box faces (formula, callable), energy inside the 2/3-rule
band, and relative divergence ``||div u||/||grad u|| <= divergence_tolerance`` (default 1e-6);
``divergence = "project"`` replaces the flow by its solenoidal part instead (Leray projection on
the grid at every evaluation; the uniform part is kept). Time-dependent flows are checked at
:data:`CHECK_TIMES` (and a third of the period when one is declared); a failure later in a run is
reported as :class:`~kindyn.errors.FlowError`.

Declared scales: ``U`` and ``k_f`` when given; otherwise measured from the grid sample at ``t = 0``:
``U = u_rms = sqrt(<|u|^2>)`` and ``k_f = sum |k| E_k / sum E_k`` (energy-weighted mean wavenumber).
"""

from __future__ import annotations

import ast
import importlib
import importlib.util
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from kindyn.errors import FlowError, ParameterError
from kindyn.flows import checks
from kindyn.flows.formula import FormulaError, parse_formula
from kindyn.flows.gridded import grid_from_hat, hat_from_grid, is_box_grid, values_at

CHECK_TIMES = (0.0, 0.5, 2.0)
COMMON_KEYS = ("U", "k_f", "divergence", "divergence_tolerance")


class SampledVelocity:
    """Wraps ``raw(x, y, z, t) -> components`` with checks, projection and a steady-flow cache."""

    def __init__(self, raw, box, steady: bool, project: bool, key: str, value, what: str):
        self.raw, self.box, self.steady, self.project = raw, box, steady, project
        self.key, self.value, self.what = key, value, what
        self._cache: dict = {}

    def call(self, x, y, z, t):
        try:
            with np.errstate(all="ignore"):
                return self.raw(x, y, z, t)
        except (ParameterError, FlowError):
            raise
        except Exception as exc:  # user code: report in one line, never a traceback
            raise FlowError(f"the {self.what} raised {type(exc).__name__} at t = {t:g}: {exc}") from None

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

    def check(self, times, divergence: str, tolerance: float, periodic: bool) -> np.ndarray:
        """Run every check at ``times``; return the coefficients at the first time."""
        first = None
        for t in times:
            try:
                u = self.grid(t)
            except FlowError as exc:
                raise ParameterError(self.key, self.value, f"a flow that evaluates on the grid ({exc})") from None
            checks.check_finite(u, self.box, self.key, self.value, t)
            if periodic:
                checks.check_periodic(self.call, self.box, self.key, self.value, t, float(np.max(np.abs(u))))
            u_hat = checks.check_coefficients(hat_from_grid(u), self.box, self.key, self.value, t,
                                              divergence, tolerance)
            if first is None:
                first = u_hat
        return first


def measured_scales(u_hat: np.ndarray, box) -> tuple[float, float]:
    """``(u_rms, energy-weighted mean |k|)`` of half-grid coefficients (k = 0 part excluded)."""
    density = box.parseval_weights * sum(np.abs(c) ** 2 for c in u_hat)
    k = np.sqrt(box.k_squared)
    total = float(density.sum())
    fluctuating = float(density[k > 0].sum())
    k_f = float((density * k).sum()) / fluctuating if fluctuating > 0 else math.nan
    return math.sqrt(total), k_f


def scales(params: dict, u_hat, box) -> tuple[float, float]:
    """``U`` and ``k_f`` from the case (validated) or measured (see module docstring)."""
    measured = measured_scales(u_hat, box)
    out = []
    for key, value in zip(("U", "k_f"), measured):
        given = params.get(key)
        if given is not None:
            if isinstance(given, bool) or not isinstance(given, (int, float)) or not (given > 0 and math.isfinite(given)):
                raise ParameterError(key, given, "a positive number")
            value = float(given)
        if not (value > 0 and math.isfinite(value)):
            raise ParameterError(key, given, f"a positive number (the flow's measured {key} is {value:g}; "
                                 "a flow with no fluctuating part cannot drive a dynamo)")
        out.append(value)
    return out[0], out[1]


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
            used |= {n.id for n in ast.walk(ast.parse(text, mode="eval")) if isinstance(n, ast.Name)}
        steady, period = "t" not in used, optional_positive(params, "period")
        divergence, tolerance = checks.divergence_options(dict(params))

        def raw(x, y, z, t):
            return tuple(f.evaluate(x, y, z, t, values) for f in formulas)

        sampler = SampledVelocity(raw, box, steady, divergence == "project", "ux, uy, uz",
                                  "; ".join(params[k] for k in ("ux", "uy", "uz")), "formula")
        u_hat = sampler.check(check_times(steady, period), divergence, tolerance, periodic=True)
        U, k_f = scales(params, u_hat, box)
        return cls(params["ux"], params["uy"], params["uz"], values, U, k_f, steady, "z" not in used,
                   None if steady else period, divergence, sampler)

    def velocity(self, x, y, z, t):
        return self.sampler.velocity(x, y, z, t)

    def fourier_coefficients(self, t: float):
        return self.sampler.fourier_coefficients(t)

    def check_box(self, box) -> None:
        _same_box(self.sampler.box, box)


# --- callable flows ------------------------------------------------------------------------------

CALLABLE_KEYS = ("function", "parameters", "steady", "period") + COMMON_KEYS


def load_function(spec, case_dir):
    """The function named ``"module:function"`` or ``"path/file.py:function"`` (path from ``case_dir``)."""
    expected = '"module:function" or "path/to/file.py:function"'
    if not isinstance(spec, str) or ":" not in spec:
        raise ParameterError("function", spec, expected)
    target, name = spec.rsplit(":", 1)
    if not target or not name.isidentifier():
        raise ParameterError("function", spec, expected)
    try:
        if target.endswith(".py") or "/" in target or "\\" in target:
            path = (Path(case_dir) / target).resolve()
            if not path.is_file():
                raise ParameterError("function", spec, f"an existing Python file ({path} not found)")
            module_spec = importlib.util.spec_from_file_location(f"kindyn_user_flow_{abs(hash(str(path)))}", path)
            module = importlib.util.module_from_spec(module_spec)
            module_spec.loader.exec_module(module)
        else:
            module = importlib.import_module(target)
    except ParameterError:
        raise
    except Exception as exc:  # user code: one line, no traceback
        raise ParameterError("function", spec, f"a module that imports cleanly; importing {target} raised "
                             f"{type(exc).__name__}: {exc}") from None
    function = getattr(module, name, None)
    if not callable(function):
        raise ParameterError("function", spec, f"a callable named {name} in {target}")
    return function


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
    z_independent = False

    @classmethod
    def from_case(cls, params: dict, box, case_dir="."):
        unknown_keys(params, CALLABLE_KEYS, "callable")
        values = numeric_parameters(params)
        spec = params.get("function")
        function = load_function(spec, case_dir)
        steady = params.get("steady", False)
        if not isinstance(steady, bool):
            raise ParameterError("steady", steady, "true or false")
        period = optional_positive(params, "period")
        divergence, tolerance = checks.divergence_options(dict(params))

        def raw(x, y, z, t):
            return function(x, y, z, t, **values)

        sampler = SampledVelocity(raw, box, False, divergence == "project", "function", spec,
                                  f"function {spec}")
        u_hat = sampler.check(check_times(False if not steady else True, period), divergence, tolerance,
                              periodic=True)
        if steady:
            _check_declared_steady(sampler, spec)
            sampler.steady = True
        U, k_f = scales(params, u_hat, box)
        return cls(spec, values, U, k_f, steady, None if steady else period, divergence, sampler)

    def velocity(self, x, y, z, t):
        return self.sampler.velocity(x, y, z, t)

    def fourier_coefficients(self, t: float):
        return self.sampler.fourier_coefficients(t)

    def check_box(self, box) -> None:
        _same_box(self.sampler.box, box)


def _check_declared_steady(sampler: SampledVelocity, spec) -> None:
    u0 = sampler.grid(0.0)
    for t in CHECK_TIMES[1:]:
        change = float(np.max(np.abs(sampler.grid(t) - u0)))
        if change > 1e-12 * max(float(np.max(np.abs(u0))), 1e-300):
            raise ParameterError("steady", True, f"a function that does not depend on t (u changes by up to "
                                 f"{change:.3g} between t = 0 and t = {t:g}); set steady = false")


def _same_box(own, box) -> None:
    if own.lengths != box.lengths or own.grid != box.grid:
        raise ParameterError("grid", list(box.grid), f"the grid the flow was built and checked on {list(own.grid)}")
