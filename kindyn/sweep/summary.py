"""The summary netCDF of a sweep, rewritten atomically after every finished point.

Layout (dimension ``point`` with an index coordinate, one entry per point including refinement
runs, ordered along the critical key within each line):

* every swept key as a variable on ``point`` named with dots replaced by underscores
  (``magnetic.Rm`` -> ``magnetic_Rm``; attribute ``case_key`` holds the dotted name): numbers and
  text are auxiliary coordinates of the point variables; list values (``domain.grid``) are a
  variable on ``(point, <name>_item)`` with a text label coordinate ``<name>_label``
  (``"24x24x24"``) on ``point``;
* ``growth_rate``, ``growth_rate_error``, ``frequency``, ``Rm``, ``cutoff_ratio``,
  ``wall_seconds`` (NaN where unknown), the flags ``converged``, ``resolution_warning``,
  ``refinement`` (bytes with numeric ``flag_values`` and ``flag_meanings``), and the texts
  ``status`` (converged / unconverged / failed / pending), ``message``, ``output``
  (``points/<identity>.nc``, relative to the summary) and ``identity``;
* dimension ``critical`` (index coordinate): ``critical_value``, ``critical_uncertainty``,
  ``critical_direction`` ("opens"/"closes"), ``critical_bracket_low/high`` and ``critical_line`` (the
  other swept values, JSON); global attributes ``dynamo_windows`` and ``resolution_study`` (JSON
  text), ``cautions``, and the provenance every kindyn file carries (the sweep's case file, its
  text, the ``--set`` overrides, the file with the overrides applied as ``case_resolved`` (each
  point's fully resolved case is in its own file), the command).

Text is stored as character arrays and flags as numbers (CF-1.8, see :mod:`kindyn.output.netcdf`).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from kindyn.errors import KindynError
from kindyn.output.netcdf import add_flag, add_index, add_strings, add_variable, atomic_dataset, provenance, set_attributes

NUMBERS = (("growth_rate", "amplitude growth rate gamma of the leading mode", "1"),
           ("growth_rate_error", "uncertainty of gamma", "1"),
           ("frequency", "angular frequency omega of the leading mode", "1"),
           ("Rm", "magnetic Reynolds number U/(eta k_f)", "1"),
           ("cutoff_ratio", "magnetic spectrum at the dealiasing cut-off / its peak", "1"),
           ("wall_seconds", "wall-clock time of the run (when it was run; reused points keep theirs)", "s"))
FLAGS = (("converged", "1 if the growth rate converged to the tolerance", ("not_converged", "converged")),
         ("resolution_warning", "1 if the run may be under-resolved (spurious growth possible)",
          ("resolved", "possibly_under_resolved")),
         ("refinement", "1 if the point was added to refine a sign change of gamma", ("listed", "refinement")))
TEXTS = (("status", "converged, unconverged, failed or pending"),
         ("message", "why a point failed or did not converge"),
         ("output", "netCDF record of the point, relative to this file"),
         ("identity", "fingerprint of the resolved case of the point"))


def variable_name(key: str) -> str:
    return key.replace(".", "_").replace("-", "_")


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _label(value) -> str:
    if isinstance(value, (list, tuple)) and all(isinstance(v, int) and not isinstance(v, bool) for v in value):
        return "x".join(map(str, value))
    return value if isinstance(value, str) else json.dumps(value)


def _add_swept_key(ds, key, column) -> str:
    """The variable(s) of one swept key; returns the name of its 1-D coordinate on ``point``."""
    name = variable_name(key)
    attrs = {"case_key": key, "long_name": f"swept case key {key}"}
    if all(_is_number(v) for v in column):
        add_variable(ds, name, ("point",), np.asarray(column, float), **attrs)
        return name
    if all(isinstance(v, (list, tuple)) and v and all(_is_number(x) for x in v) for v in column) \
            and len({len(v) for v in column}) == 1:
        ds.createDimension(f"{name}_item", len(column[0]))
        add_variable(ds, name, ("point", f"{name}_item"), np.asarray(column, float), **attrs)
        add_strings(ds, f"{name}_label", ("point",), [_label(v) for v in column],
                    f"swept case key {key} as text", case_key=key)
        return f"{name}_label"
    add_strings(ds, name, ("point",), [_label(v) for v in column], attrs.pop("long_name"), **attrs)
    return name


def sweep_provenance(attributes: dict) -> dict:
    """The provenance attributes of the sweep's case file (``case_file``, ``case_overrides`` from
    the driver's ``attributes``): its text and, as ``case_resolved``, its TOML with the overrides."""
    from kindyn.case.load import apply_overrides, read_toml

    file = str(attributes.get("case_file", ""))
    overrides = list(attributes.get("case_overrides", []))
    text, resolved, flow_type = "", {}, ""
    try:
        text, data = read_toml(file)
        resolved = apply_overrides(data, overrides)
        flow_type = str(resolved.get("flow", {}).get("type", ""))
    except (KindynError, OSError, AttributeError):  # the file changed or went away: provenance as far as known
        pass
    title = "kindyn parameter sweep: growth rate of the leading mode at every point"
    return provenance(title, None, file, text, overrides, resolved, flow_type)


def write_summary(path, spec, rows, critical, windows, resolution, attributes) -> None:
    """Write the summary of ``rows`` atomically to ``path``.

    ``rows``: one dict per point with ``values`` (swept key -> value), ``refinement`` and the
    record keys (``growth_rate`` ... ``status``); ``critical``: list of dicts with ``value``,
    ``uncertainty``, ``direction``, ``bracket``, ``line``; ``windows``, ``resolution``: JSON-ready.
    """
    with atomic_dataset(path) as ds:
        set_attributes(ds, {
            **sweep_provenance(attributes),
            "sweep": spec.describe(),
            "dynamo_windows": windows,
            "resolution_study": resolution,
            "caution": "an under-resolved run can show spurious growth; check resolution_warning and "
                       "repeat on a finer grid (a resolution study: kindyn sweep --grids)",
            **attributes,
        })
        add_index(ds, "point", len(rows), "sweep point index")
        coordinates = [_add_swept_key(ds, key, [r["values"].get(key) for r in rows]) for key in spec.keys]
        coords = " ".join(coordinates)
        for name, long_name, units in NUMBERS:
            data = np.array([np.nan if r.get(name) is None else float(r[name]) for r in rows], float)
            add_variable(ds, name, ("point",), data, units=units, long_name=long_name, coordinates=coords)
        for name, long_name, meanings in FLAGS:
            add_flag(ds, name, ("point",), [1 if r.get(name) else 0 for r in rows], long_name, meanings,
                     coordinates=coords)
        for name, long_name in TEXTS:
            texts = [r.get(name) for r in rows]
            if name == "output":  # relative to the summary file, which sits beside points/
                texts = [f"points/{Path(t).name}" if t else "" for t in texts]
            add_strings(ds, name, ("point",), texts, long_name, coordinates=coords)
        add_index(ds, "critical", len(critical), "index of the sign changes of gamma")
        set_attributes(ds, {"critical_key": spec.critical or ""})
        add_variable(ds, "critical_value", ("critical",), np.array([c["value"] for c in critical], float),
                     long_name=f"value of {spec.critical} where gamma changes sign")
        add_variable(ds, "critical_uncertainty", ("critical",),
                     np.array([c["uncertainty"] for c in critical], float), long_name="uncertainty of critical_value")
        add_variable(ds, "critical_bracket_low", ("critical",), np.array([c["bracket"][0] for c in critical], float),
                     long_name="last point before the sign change")
        add_variable(ds, "critical_bracket_high", ("critical",), np.array([c["bracket"][1] for c in critical], float),
                     long_name="first point after the sign change")
        add_strings(ds, "critical_direction", ("critical",), [c["direction"] for c in critical],
                    "opens: gamma turns positive as the key increases; closes: turns negative")
        add_strings(ds, "critical_line", ("critical",), [json.dumps(c["line"]) for c in critical],
                    "values of the other swept keys on this line (JSON)")
