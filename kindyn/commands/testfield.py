"""``kindyn testfield CASE.toml``: alpha and eta (beta) tensors by the test-field method, beside SOCA.

Settings come from the case's ``[testfield]`` section (see :mod:`kindyn.testfield.settings`).
Writes ``NAME-testfield.nc`` (all tensors with errors) and ``NAME-testfield.png`` (alpha and eta_t
versus K with SOCA) into ``--out``; ``--json`` prints one object on stdout with at least ``alpha``,
``alpha_soca`` (3 x 3, row = EMF component), ``K``, ``alpha_K``, ``eta_K``, ``alpha_K_soca``,
``eta_K_soca`` (one 3 x 2 list per K: row = EMF component x, y, z; column = the two mean-field
components perpendicular to the averaging axis, in x, y, z order), ``Rm``, ``eta``, ``converged``.
"""

from __future__ import annotations

import json
import math

import numpy as np

from kindyn.commands.common import add_case_arguments, case_from_args, clean_number, output_folder, print_json, say
from kindyn.testfield.calibration import SIGNS, SOCA_CAUTION, calibrate
from kindyn.testfield.kernels import LorentzianFit

HELP = "alpha and eta (beta) tensors of the flow by the test-field method, beside SOCA"


def add_arguments(parser) -> None:
    add_case_arguments(parser)
    parser.add_argument("--quiet", action="store_true", help="no progress lines on stderr")


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
        "eta_t": _nested(h),
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
                                       for k, v in result.closure.items()},
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


def execute(args) -> int:
    case = case_from_args(args)
    from kindyn.testfield.settings import plan_from_case

    plan_from_case(case)  # every check that needs the box, before any output folder is made
    out = output_folder(args)
    nc_path, png_path = out / f"{case.name}-testfield.nc", out / f"{case.name}-testfield.png"
    progress = None if args.quiet else (lambda text: say("  " + text))
    if not args.quiet:
        say(f"kindyn testfield {case.path}: {case.flow_type} flow, grid {list(case.box.grid)}, "
            f"Rm = {case.Rm:.6g} (eta = {case.eta:.6g})")
    result = calibrate(case, progress=progress, direct_run=direct_growth_run)
    summary = summary_of(case, result)
    from kindyn.output.testfield_file import result_arrays, write_testfield_file

    attributes = {
        "sign_convention": SIGNS,
        "averaging_axis": "xyz"[result.axis],
        "caution": "; ".join(result.notes),
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
                              f"to {'xyz'[result.axis]}", fits=_fit_callables(result.fits), note=note)
    summary["output"] = str(nc_path)
    summary["figure"] = str(png_path) if case.output.figure else None
    if args.json:
        print_json(summary)
    if not args.quiet:
        state = "converged" if result.converged else f"NOT converged ({result.stop_reason})"
        for k, ak, hk, aks, hks in zip(result.K, *result.horizontal(), *result.horizontal(soca=True)):
            say(f"  K = {k:.4g}: alpha = {ak:+.6g} (SOCA {aks:+.6g}), eta_t = {hk:+.6g} (SOCA {hks:+.6g})")
        if result.closure:
            c = result.closure
            say(f"  closure: mean-field p = {c['mean_field_growth_rate']:+.5g}, direct run "
                f"{c['direct_growth_rate']}, relative difference {c['relative_difference']}")
        for note in result.notes:
            say(f"kindyn testfield: caution: {note}")
        say(f"{state}; wrote {nc_path}" + (f" and {png_path}" if case.output.figure else ""))
    return 0
