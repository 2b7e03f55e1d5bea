"""Plain-data views of a :class:`~kindyn.testfield.calibration.TestFieldResult`: the JSON summary of
``kindyn testfield`` and the global attributes of its netCDF file.

Both are used by the command and by the ensemble members that a sweep pool runs
(:mod:`kindyn.sweep.testfield_ensemble`), so they live here, below both. Arrays become nested
lists with NaN/Inf as None (valid JSON); :func:`arrays_from_nested` turns them back.

JSON keys (beside those listed in :mod:`kindyn.commands.testfield`): ``directions`` (the averaging
axes computed), ``planar`` (per direction: ``alpha_K``, ``eta_K``, SOCA and errors, ``3 x 2`` per K,
columns = that direction's perpendicular components), ``full_set`` and ``full_set_errors``
(:mod:`kindyn.testfield.full_set`: ``alpha_sym``, ``gamma``, ``gamma_K``, ``delta_planar``,
``beta_ijk`` with None where not determined, and with all three directions ``eta_ij``,
``beta_sym``, ``delta``, ``kappa``; ``_soca`` variants), ``beta_undetermined`` (which components
and why), ``findings`` (negative eddy / total diffusivity with errors) and
``sign_convention_full_set``.
"""

from __future__ import annotations

import json
import math

import numpy as np

from kindyn.testfield.full_set import ONE_AXIS, SIGNS as FULL_SET_SIGNS, UNDETERMINED

AXES = "xyz"
RESET_CAUTION_TEXT = "above dynamo onset, coefficients of time-stepped test problems depend on the reset interval"


def clean(x):
    """A float, or None for NaN/Inf/None."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def nested(array):
    """Nested lists with NaN/Inf as None (valid JSON)."""
    if array is None:
        return None
    return [nested(a) for a in array] if np.ndim(array) > 0 else clean(array)


def arrays_from_nested(data: dict) -> dict:
    """Inverse of :func:`nested` for a dict of them (None -> NaN)."""
    return {k: (None if v is None else np.array(v, dtype=float)) for k, v in data.items()}


def _plain(value):
    if isinstance(value, np.ndarray):
        return nested(value)
    if isinstance(value, (np.floating, np.integer, np.bool_)):
        return _plain(value.item())
    if isinstance(value, float):
        return clean(value)
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value


def summary_of(case, result, closure: dict | None = None) -> dict:
    """The JSON summary of ``result`` (``closure``: the closure report with errors, or None)."""
    from kindyn.testfield.calibration import SIGNS

    t, e = result.tensors, result.errors
    a, h = result.horizontal()
    a_s, h_s = result.horizontal(soca=True)
    ea, eh = result.horizontal_errors()
    out = {
        "alpha": nested(t.get("alpha")),
        "alpha_error": nested(e.get("alpha")),
        "alpha_soca": nested(t.get("alpha_soca")),
        "alpha_soca_error": nested(e.get("alpha_soca")),
        "axis": AXES[result.axis],
        "directions": [AXES[d] for d in result.directions],
        "mean_components": [c for i, c in enumerate(AXES) if i != result.axis],
        "K": [float(k) for k in result.K],
        "alpha_K": nested(t["alpha_K"]),
        "alpha_K_error": nested(e["alpha_K"]),
        "eta_K": nested(t["eta_K"]),
        "eta_K_error": nested(e["eta_K"]),
        "alpha_K_soca": nested(t["alpha_K_soca"]),
        "eta_K_soca": nested(t["eta_K_soca"]),
        "beta_K": nested(result.beta()),
        "alpha_horizontal": nested(a),
        "alpha_horizontal_error": nested(ea),
        "eta_t": nested(h),
        "eta_t_error": nested(eh),
        "alpha_horizontal_soca": nested(a_s),
        "eta_t_soca": nested(h_s),
        "planar": {AXES[s]: {
            "mean_components": [c for i, c in enumerate(AXES) if i != s],
            **{key: nested(result.planar(base, s, soca, err))
               for base in ("alpha_K", "eta_K") for soca in (False, True) for err in (False, True)
               for key in [base + ("_soca" if soca else "") + ("_error" if err else "")]},
            "eta_t": nested(result.horizontal(axis=s)[1]),
            "eta_t_error": nested(result.horizontal_errors(axis=s)[1]),
        } for s in result.directions},
        "full_set": {k: nested(v) for k, v in result.full_set.items()},
        "full_set_errors": {k: nested(v) for k, v in result.full_set_errors.items()},
        "beta_undetermined": UNDETERMINED if len(result.directions) == 3 else UNDETERMINED + "; " + ONE_AXIS,
        "findings": _plain(result.findings),
        "kernel_fits": _plain(result.fits),
        "Rm": result.Rm,
        "eta": result.eta,
        "U": result.speed,
        "k_f": result.k_f,
        "method": result.method,
        "converged": bool(result.converged),
        "stop_reason": result.stop_reason,
        "growing_test_solutions": bool(result.growing),
        "onset_growth_rates": {k: clean(v) for k, v in result.onset_growth_rates.items()},
        "solver": _plain(result.solver),
        "closure": _plain(closure) if closure else None,
        "sign_convention": SIGNS,
        "sign_convention_full_set": FULL_SET_SIGNS,
        "cautions": list(result.notes),
        "resolution_warning": bool(getattr(result, "resolution", {}).get("resolution_warning", False)),
        "resolution": _plain(getattr(result, "resolution", {}) or {}),
    }
    ensemble = getattr(result, "ensemble", None)
    if ensemble:
        out["ensemble"] = _plain(ensemble)
    return out


def file_attributes(result, summary: dict, cautions) -> dict:
    """Global attributes of the netCDF file (conventions, cautions, solver, fits, closure, findings)."""
    from kindyn.testfield.calibration import SIGNS, SOCA_CAUTION

    attributes = {
        "sign_convention": SIGNS,
        "sign_convention_full_set": FULL_SET_SIGNS,
        "beta_undetermined": summary["beta_undetermined"],
        "averaging_axis": AXES[result.axis],
        "averaging_directions": " ".join(AXES[d] for d in result.directions),
        "caution": "; ".join(cautions),
        "soca_caution": SOCA_CAUTION,
        "reset_caution": RESET_CAUTION_TEXT,
        "solver": json.dumps(summary["solver"]),
        "kernel_fits": json.dumps(summary["kernel_fits"]),
        "closure": json.dumps(summary["closure"]) if summary["closure"] else "",
        "onset_growth_rates": json.dumps(summary["onset_growth_rates"]),
        "findings": json.dumps(summary["findings"]),
        "resolution_warning": int(bool(summary.get("resolution_warning"))),
        "resolution": json.dumps(summary.get("resolution") or {}),
    }
    if summary.get("ensemble"):
        attributes["ensemble"] = json.dumps({k: v for k, v in summary["ensemble"].items() if k != "members"})
    return attributes
