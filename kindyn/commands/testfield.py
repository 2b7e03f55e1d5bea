"""``kindyn testfield CASE.toml``: alpha and eta (beta) tensors by the test-field method, beside SOCA.

Settings come from the case's ``[testfield]`` section (see :mod:`kindyn.testfield.settings`).
Writes ``NAME-testfield.nc`` (all tensors with errors) and ``NAME-testfield.png`` (alpha and eta_t
versus K with SOCA) into ``--out``; ``--json`` prints one object on stdout with at least ``alpha``,
``alpha_soca`` (3 x 3, row = EMF component), ``K``, ``alpha_K``, ``eta_K``, ``alpha_K_soca``,
``eta_K_soca`` (one 3 x 2 list per K: row = EMF component x, y, z; column = the two mean-field
components perpendicular to the averaging axis, in x, y, z order), ``Rm``, ``eta``, ``converged``,
``cautions``.

The text report (stdout; progress on stderr) shows every coefficient with its error (value +- error,
the error rounded to one significant digit and the value to the same place; direct steady solves
have no statistical error, which the report says once): the uniform-field ``alpha_ij`` (3 x 3,
full and SOCA), the full ``alpha_ij(K)`` and ``eta_ij(K)`` blocks (3 x 2, off-diagonal terms
included) with their in-plane means beside SOCA, the kernel fits (and which parameter each fixed),
the closure check rounded to its error, and the cautions.
"""

from __future__ import annotations

import json
import math

import numpy as np

from kindyn.commands.common import (Reporter, add_case_arguments, add_quiet_argument, case_from_args, clean_number,
                                    number_text, output_folder, with_error)
from kindyn.testfield.calibration import SIGNS, SOCA_CAUTION, calibrate
from kindyn.testfield.kernels import LorentzianFit

HELP = "alpha and eta (beta) tensors of the flow by the test-field method, beside SOCA"


def add_arguments(parser) -> None:
    add_case_arguments(parser)
    add_quiet_argument(parser)


def _nested(array):
    """Nested lists with NaN/Inf as None (valid JSON)."""
    if array is None:
        return None
    return [_nested(a) for a in array] if np.ndim(array) > 0 else clean_number(array)


def summary_of(case, result) -> dict:
    t, e = result.tensors, result.errors
    a, h = result.horizontal()
    a_s, h_s = result.horizontal(soca=True)
    out = {
        "alpha": _nested(t.get("alpha")),
        "alpha_error": _nested(e.get("alpha")),
        "alpha_soca": _nested(t.get("alpha_soca")),
        "alpha_soca_error": _nested(e.get("alpha_soca")),
        "axis": "xyz"[result.axis],
        "mean_components": [c for i, c in enumerate("xyz") if i != result.axis],
        "K": [float(k) for k in result.K],
        "alpha_K": _nested(t["alpha_K"]),
        "alpha_K_error": _nested(e["alpha_K"]),
        "eta_K": _nested(t["eta_K"]),
        "eta_K_error": _nested(e["eta_K"]),
        "alpha_K_soca": _nested(t["alpha_K_soca"]),
        "eta_K_soca": _nested(t["eta_K_soca"]),
        "beta_K": _nested(result.beta()),
        "alpha_horizontal": _nested(a),
        "alpha_horizontal_error": _nested(result.horizontal_errors()[0]),
        "eta_t": _nested(h),
        "eta_t_error": _nested(result.horizontal_errors()[1]),
        "alpha_horizontal_soca": _nested(a_s),
        "eta_t_soca": _nested(h_s),
        "kernel_fits": {k: {kk: (clean_number(vv) if isinstance(vv, float) else vv) for kk, vv in v.items()}
                        for k, v in result.fits.items()},
        "Rm": result.Rm,
        "eta": result.eta,
        "U": result.speed,
        "k_f": result.k_f,
        "method": result.method,
        "converged": bool(result.converged),
        "stop_reason": result.stop_reason,
        "growing_test_solutions": bool(result.growing),
        "onset_growth_rates": {k: clean_number(v) for k, v in result.onset_growth_rates.items()},
        "solver": {k: (clean_number(v) if isinstance(v, float) else v) for k, v in result.solver.items()},
        "closure": result.closure and {k: (clean_number(v) if isinstance(v, float) else v)
                                       for k, v in closure_with_errors(result).items()},
        "sign_convention": SIGNS,
        "cautions": list(result.notes),
    }
    return out


def _fit_callables(fits: dict) -> dict:
    out = {}
    for key, f in fits.items():
        if f.get("c0") is not None and math.isfinite(f["c0"]) and math.isfinite(f["kc"]):
            out[key] = LorentzianFit(f["c0"], f["kc"], f["kc_fixed"], f["rms_relative_misfit"])
    return out


def direct_growth_run(case):
    """The closure check's direct run (``kindyn run`` on the same case): ``(rate, error, field_hat)``."""
    from kindyn.run import run_growth

    outcome = run_growth(case)
    return outcome.estimate.growth_rate, outcome.estimate.error, outcome.field_hat


def closure_with_errors(result) -> dict:
    """The closure report with ``mean_field_growth_rate_error`` (``K |d alpha| + K^2 d eta_t`` from the
    coefficient errors; None for a direct steady solve, which has none) and ``relative_difference_error``
    (first-order propagation of both errors)."""
    c = dict(result.closure)
    K = c["K"]
    i = list(np.round(result.K, 12)).index(round(K, 12)) if round(K, 12) in list(np.round(result.K, 12)) else None
    ea, eh = result.horizontal_errors()
    dp = math.nan if i is None else K * abs(float(ea[i])) + K ** 2 * abs(float(eh[i]))
    c["mean_field_growth_rate_error"] = dp if math.isfinite(dp) else None
    p, g, dg = c["mean_field_growth_rate"], c.get("direct_growth_rate"), c.get("direct_growth_rate_error")
    rel = None
    if c.get("relative_difference") is not None and g:
        dp0 = dp if math.isfinite(dp) else 0.0
        dg0 = float(dg) if dg is not None and math.isfinite(float(dg)) else math.nan
        rel = math.hypot(dp0 / abs(g), abs(p) * dg0 / g ** 2)
    c["relative_difference_error"] = rel if rel is not None and math.isfinite(rel) else None
    return c


def _cell(value, error, floor: float = 0.0) -> str:
    """``value +- error``; without an error (direct solve) 6 significant digits, and ``0`` at or below
    ``floor`` (the solver-residual level)."""
    if error is None or not math.isfinite(float(error)):
        if value is not None and math.isfinite(float(value)) and abs(float(value)) <= floor:
            return "0"
        return number_text(value, 6, sign=True)
    return with_error(value, error, sign=True)


def _residual_level(result) -> float:
    """Relative size below which a direct solve's entries are zero within its accuracy (its GMRES
    residual, at least 1e-13); 0 for time-stepped results, which carry errors."""
    if result.method != "direct":
        return 0.0
    residual = result.solver.get("max_relative_residual") or 0.0
    return max(float(residual), 1e-13) if math.isfinite(float(residual)) else 0.0


def _table(rows, row_names, column_names, width) -> list[str]:
    head = "      " + "".join(f"{name:>{width}}" for name in column_names)
    return [head] + [f"    {r} " + "".join(f"{cell:>{width}}" for cell in row) for r, row in zip(row_names, rows)]


def error_kind(result) -> str:
    if result.method == "direct":
        residual = result.solver.get("max_relative_residual")
        return ("errors: none statistical (direct steady solve, exact up to the GMRES relative residual "
                f"{number_text(residual, 2)}); values to 6 significant digits, 0 where below the residual level "
                f"{number_text(_residual_level(result), 2)} of the tensor's largest entry")
    return f"errors: {result.solver.get('kind', 'time stepping')}: standard errors of the block means"


def text_report(case, result) -> list[str]:
    """The lines of the text report (see module docstring)."""
    t, e = result.tensors, result.errors
    axes = "xyz"
    perp = [axes[j] for j in range(3) if j != result.axis]
    state = "converged" if result.converged else f"NOT converged ({result.stop_reason})"
    lines = [f"{case.name}: {case.flow_type} flow, Rm = {case.Rm:.6g} (eta = {case.eta:.6g}), averages over "
             f"planes normal to {axes[result.axis]}, method {result.method}: {state}", error_kind(result)]

    level = _residual_level(result)

    def cells(values, errors):
        errors = np.full_like(values, np.nan) if errors is None else errors
        finite = np.abs(values)[np.isfinite(values)]
        floor = level * float(finite.max()) if finite.size else 0.0
        return [[_cell(v, er, floor) for v, er in zip(vr, err)] for vr, err in zip(values, errors)]

    for name, label in (("alpha", "alpha_ij"), ("alpha_soca", "SOCA alpha_ij")):
        if t.get(name) is not None:
            rows = cells(t[name], e.get(name))
            width = max(12, *(len(c) + 2 for r in rows for c in r))
            lines.append(f"uniform test fields: {label} (row i = EMF component, column j = field component)")
            lines += _table(rows, axes, axes, width)
    a, h = result.horizontal()
    ea, eh = result.horizontal_errors()
    a_s, h_s = result.horizontal(soca=True)
    for n, K in enumerate(result.K):
        rows_a = cells(t["alpha_K"][n], e["alpha_K"][n])
        rows_h = cells(t["eta_K"][n], e["eta_K"][n])
        width = max(12, *(len(c) + 2 for r in rows_a + rows_h for c in r))
        lines.append(f"K = {K:.6g}: alpha_ij(K) | eta_ij(K) (row i = EMF component, column j = {', '.join(perp)})")
        head = "      " + "".join(f"{'alpha_i' + j:>{width}}" for j in perp) + "   |" + \
            "".join(f"{'eta_i' + j:>{width}}" for j in perp)
        lines.append(head)
        for r, ra, rh in zip(axes, rows_a, rows_h):
            lines.append(f"    {r} " + "".join(f"{c:>{width}}" for c in ra) + "   |" + "".join(f"{c:>{width}}" for c in rh))
        lines.append(f"    in-plane means: alpha = {_cell(a[n], ea[n])} (SOCA {number_text(a_s[n], 6, True)}), "
                     f"eta_t = {_cell(h[n], eh[n])} (SOCA {number_text(h_s[n], 6, True)})")
    for key, label in (("alpha", "alpha"), ("eta_t", "eta_t"), ("alpha_soca", "SOCA alpha"),
                       ("eta_t_soca", "SOCA eta_t")):
        f = result.fits.get(key)
        if f:
            lines.append(f"kernel fit {label}(K) = c_0/(1 + (K/k_c)^2): c_0 = {number_text(f['c0'], 5, True)}, "
                         f"k_c = {number_text(f['kc'], 5)}, rms relative misfit {number_text(f['rms_relative_misfit'], 2)}"
                         + (f" ({f['note']})" if f.get("note") else ""))
    if result.closure:
        c = closure_with_errors(result)
        p = _cell(c["mean_field_growth_rate"], c["mean_field_growth_rate_error"])
        if c["mean_field_growth_rate_error"] is None:
            p += " (no statistical error)"
        g = c.get("direct_growth_rate")
        direct = "n/a" if g is None or not math.isfinite(g) else with_error(g, c.get("direct_growth_rate_error"), True)
        rel = c.get("relative_difference")
        rel_text = "n/a" if rel is None else with_error(rel, c["relative_difference_error"])
        lines.append(f"closure (K = {c['K']:.4g}): mean-field p = |alpha| K - (eta + eta_t) K^2 = {p}; direct run "
                     f"gamma = {direct}; relative difference {rel_text}")
    return lines


def execute(args) -> int:
    report = Reporter("testfield", args)
    case = case_from_args(args)
    from kindyn.testfield.settings import plan_from_case

    plan_from_case(case)  # every check that needs the box, before any output folder is made
    out = output_folder(args)
    nc_path, png_path = out / f"{case.name}-testfield.nc", out / f"{case.name}-testfield.png"
    progress = None if report.quiet else (lambda text: report.progress("  " + text))
    report.progress(f"kindyn testfield {case.path}: {case.flow_type} flow, grid {list(case.box.grid)}, "
                    f"Rm = {case.Rm:.6g} (eta = {case.eta:.6g})")
    result = calibrate(case, progress=progress, direct_run=direct_growth_run)
    summary = summary_of(case, result)
    from kindyn.output.testfield_file import result_arrays, write_testfield_file

    cautions = list(result.notes)
    if result.closure and result.closure.get("caution"):
        cautions.append(f"closure check: {result.closure['caution']}")
    summary["cautions"] = cautions
    attributes = {
        "sign_convention": SIGNS,
        "averaging_axis": "xyz"[result.axis],
        "caution": "; ".join(cautions),
        "soca_caution": SOCA_CAUTION,
        "reset_caution": "above dynamo onset, coefficients of time-stepped test problems depend on the reset interval",
        "solver": json.dumps(summary["solver"]),
        "kernel_fits": json.dumps(summary["kernel_fits"]),
        "closure": json.dumps(summary["closure"]) if summary["closure"] else "",
        "onset_growth_rates": json.dumps(summary["onset_growth_rates"]),
    }
    write_testfield_file(nc_path, case, summary, result_arrays(result), attributes)
    if case.output.figure:
        from kindyn.output.figures_testfield import coefficients_versus_K

        a, h = result.horizontal()
        a_s, h_s = result.horizontal(soca=True)
        ea, eh = result.horizontal_errors()
        note = "" if result.converged else f"NOT converged: {result.stop_reason}"
        coefficients_versus_K(png_path, result.K, a, ea, h, eh, a_s, h_s,
                              f"{case.name}: {case.flow_type}, Rm = {case.Rm:.4g}, average over planes normal "
                              f"to {'xyz'[result.axis]}", fits=_fit_callables(result.fits), note=note,
                              alpha_uniform=(result.uniform_alpha(), result.uniform_alpha(soca=True)))
    summary["output"] = str(nc_path)
    summary["figure"] = str(png_path) if case.output.figure else None
    for line in text_report(case, result):
        report.result(line)
    for caution in cautions:
        report.caution(caution)
    report.result(f"wrote {nc_path}" + (f" and {png_path}" if case.output.figure else ""))
    report.finish(summary)
    return 0
