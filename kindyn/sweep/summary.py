"""The summary netCDF of a sweep, rewritten atomically after every finished point.

Layout (dimension ``point``, one entry per point including refinement runs, ordered along the
critical key within each line):

* every swept key as a coordinate variable on ``point`` named with dots replaced by underscores
  (``magnetic.Rm`` -> ``magnetic_Rm``; attribute ``case_key`` holds the dotted name); list values
  (``domain.grid``) get a second dimension ``<name>_item``; text values are strings;
* ``growth_rate``, ``growth_rate_error``, ``frequency``, ``Rm``, ``cutoff_ratio``,
  ``wall_seconds`` (NaN where unknown), ``converged``, ``resolution_warning``, ``refinement``
  (0/1 bytes), ``status`` (converged / unconverged / failed / pending), ``message``, ``output``
  (``points/<identity>.nc``, relative to the summary) and ``identity`` (strings);
* dimension ``critical``: ``critical_value``, ``critical_uncertainty``, ``critical_direction``
  ("opens"/"closes"), ``critical_bracket_low/high`` and ``critical_line`` (the other swept values,
  JSON); global attributes ``dynamo_windows`` and ``resolution_study`` (JSON text), ``cautions``.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from kindyn._version import __version__
from kindyn.output.netcdf import CONVENTIONS, add_variable, atomic_dataset, set_attributes

NUMBERS = (("growth_rate", "amplitude growth rate gamma of the leading mode", "1"),
           ("growth_rate_error", "uncertainty of gamma", "1"),
           ("frequency", "angular frequency omega of the leading mode", "1"),
           ("Rm", "magnetic Reynolds number U/(eta k_f)", "1"),
           ("cutoff_ratio", "magnetic spectrum at the dealiasing cut-off / its peak", "1"),
           ("wall_seconds", "wall-clock time of the run (when it was run; reused points keep theirs)", "s"))
FLAGS = (("converged", "1 if the growth rate converged to the tolerance"),
         ("resolution_warning", "1 if the run may be under-resolved (spurious growth possible)"),
         ("refinement", "1 if the point was added to refine a sign change of gamma"))
TEXTS = (("status", "converged, unconverged, failed or pending"),
         ("message", "why a point failed or did not converge"),
         ("output", "netCDF record of the point, relative to this file"),
         ("identity", "fingerprint of the resolved case of the point"))


def variable_name(key: str) -> str:
    return key.replace(".", "_").replace("-", "_")


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _add_strings(ds, name, dims, values, long_name, **attrs):
    var = ds.createVariable(name, str, dims)
    for i, v in enumerate(values):
        var[i] = "" if v is None else str(v)
    set_attributes(var, {"long_name": long_name, **attrs})


def _add_swept_key(ds, key, column):
    name = variable_name(key)
    attrs = {"case_key": key, "long_name": f"swept case key {key}"}
    if all(_is_number(v) for v in column):
        add_variable(ds, name, ("point",), np.asarray(column, float), **attrs)
    elif all(isinstance(v, (list, tuple)) and v and all(_is_number(x) for x in v) for v in column) \
            and len({len(v) for v in column}) == 1:
        ds.createDimension(f"{name}_item", len(column[0]))
        add_variable(ds, name, ("point", f"{name}_item"), np.asarray(column, float), **attrs)
    else:
        _add_strings(ds, name, ("point",), [json.dumps(v) if not isinstance(v, str) else v for v in column],
                     **attrs)
    return name


def write_summary(path, spec, rows, critical, windows, resolution, attributes) -> None:
    """Write the summary of ``rows`` atomically to ``path``.

    ``rows``: one dict per point with ``values`` (swept key -> value), ``refinement`` and the
    record keys (``growth_rate`` ... ``status``); ``critical``: list of dicts with ``value``,
    ``uncertainty``, ``direction``, ``bracket``, ``line``; ``windows``, ``resolution``: JSON-ready.
    """
    with atomic_dataset(path) as ds:
        set_attributes(ds, {
            "Conventions": CONVENTIONS,
            "title": "kindyn parameter sweep: growth rate of the leading mode at every point",
            "source": f"kindyn {__version__}",
            "kindyn_version": __version__,
            "sweep": spec.describe(),
            "dynamo_windows": windows,
            "resolution_study": resolution,
            "caution": "an under-resolved run can show spurious growth; check resolution_warning and "
                       "repeat on a finer grid (a resolution study: kindyn sweep --grids)",
            **attributes,
        })
        ds.createDimension("point", len(rows))
        coordinates = [_add_swept_key(ds, key, [r["values"].get(key) for r in rows]) for key in spec.keys]
        coords = " ".join(coordinates)
        for name, long_name, units in NUMBERS:
            data = np.array([np.nan if r.get(name) is None else float(r[name]) for r in rows], float)
            add_variable(ds, name, ("point",), data, units=units, long_name=long_name, coordinates=coords)
        for name, long_name in FLAGS:
            add_variable(ds, name, ("point",), np.array([1 if r.get(name) else 0 for r in rows], np.int8),
                         long_name=long_name, dtype="i1", flag_values="0 1", coordinates=coords)
        for name, long_name in TEXTS:
            texts = [r.get(name) for r in rows]
            if name == "output":  # relative to the summary file, which sits beside points/
                texts = [f"points/{Path(t).name}" if t else "" for t in texts]
            _add_strings(ds, name, ("point",), texts, long_name, coordinates=coords)
        ds.createDimension("critical", len(critical))
        set_attributes(ds, {"critical_key": spec.critical or ""})
        add_variable(ds, "critical_value", ("critical",), np.array([c["value"] for c in critical], float),
                     long_name=f"value of {spec.critical} where gamma changes sign")
        add_variable(ds, "critical_uncertainty", ("critical",),
                     np.array([c["uncertainty"] for c in critical], float), long_name="uncertainty of critical_value")
        add_variable(ds, "critical_bracket_low", ("critical",), np.array([c["bracket"][0] for c in critical], float),
                     long_name="last point before the sign change")
        add_variable(ds, "critical_bracket_high", ("critical",), np.array([c["bracket"][1] for c in critical], float),
                     long_name="first point after the sign change")
        _add_strings(ds, "critical_direction", ("critical",), [c["direction"] for c in critical],
                     "opens: gamma turns positive as the key increases; closes: turns negative")
        _add_strings(ds, "critical_line", ("critical",), [json.dumps(c["line"]) for c in critical],
                     "values of the other swept keys on this line (JSON)")
