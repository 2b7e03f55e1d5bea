"""The netCDF record of a test-field calibration (``kindyn testfield``).

Variables (row ``i`` = EMF component x, y, z; see the ``sign_convention`` attribute):

* ``alpha``, ``alpha_error``, ``alpha_soca``, ``alpha_soca_error``: ``(emf_component, field_component)``
  from the uniform test fields (box average), when computed;
* ``K`` (``wavenumber``), and ``alpha_K``, ``eta_K``, ``beta_K`` with ``_error`` and ``_soca``
  variants: ``(wavenumber, emf_component, mean_component)``, ``mean_component`` = the two components
  perpendicular to the averaging axis in x, y, z order (``beta_K`` is ``beta_ijs``, s = axis);
* ``alpha_horizontal``, ``eta_t`` (and ``_soca``): in-plane means of the diagonals versus K;
* for time-stepped runs, the block series ``block_time``, ``block_valid``, ``block_log_energy`` and
  ``block_alpha_K``/``block_eta_K`` (and ``block_alpha`` with uniform test fields).

Errors are standard errors from block averages (time-dependent flows), the last change (time-
stepped steady flows) or NaN (direct steady solves; see ``solver``). Global attributes carry the
conventions, the cautions, the kernel fits, the closure check and the resolved case (JSON).
"""

from __future__ import annotations


import numpy as np

from kindyn.output.netcdf import provenance_attributes, add_variable, atomic_dataset, set_attributes

AXES = "xyz"


def write_testfield_file(path, case, summary: dict, arrays: dict, attributes: dict) -> None:
    """Write ``arrays`` (name -> (dims, data, long_name)) and attributes to ``path`` atomically.

    ``summary`` (the JSON summary) is stored as result attributes; ``attributes`` adds conventions
    and cautions. Dimensions are created from the first variable that uses them.
    """
    with atomic_dataset(path) as ds:
        set_attributes(ds, {
            **provenance_attributes(case, f"kindyn test-field coefficients: {case.name}"),
            **attributes,
            **{f"result_{k}": v for k, v in summary.items() if not isinstance(v, (list, dict))},
        })
        for name, (dims, data, long_name) in arrays.items():
            data = np.asarray(data, float)
            for dim, size in zip(dims, data.shape):
                if dim not in ds.dimensions:
                    ds.createDimension(dim, size)
            add_variable(ds, name, dims, data, long_name=long_name)
        if "emf_component" in ds.dimensions:
            add_variable(ds, "emf_component_name", ("emf_component",), np.arange(3),
                         long_name="EMF component index: 0 = x, 1 = y, 2 = z", dtype="i4")


def result_arrays(result) -> dict:
    """The arrays of a :class:`~kindyn.testfield.calibration.TestFieldResult` for the file."""
    out = {}
    t, e = result.tensors, result.errors
    perp = "".join(AXES[j] for j in range(3) if j != result.axis)
    if "alpha" in t:
        for name in ("alpha", "alpha_soca"):
            label = "SOCA " if name.endswith("soca") else ""
            out[name] = (("emf_component", "field_component"), t[name],
                         f"{label}alpha_ij from uniform test fields (box average), row i = EMF component")
            out[name + "_error"] = (("emf_component", "field_component"), e[name],
                                    f"uncertainty of {name} (NaN: direct steady solve)")
    out["K"] = (("wavenumber",), result.K, f"test-field wavenumber K along {AXES[result.axis]}")
    for soca in (False, True):
        sfx = "_soca" if soca else ""
        label = "SOCA " if soca else ""
        for name, what in (("alpha_K", "alpha_ij"), ("eta_K", "eta_ij")):
            key = name + sfx
            out[key] = (("wavenumber", "emf_component", "mean_component"), t[key],
                        f"{label}{what}(K), planar average along {AXES[result.axis]}; columns j = {perp[0]}, {perp[1]}")
            out[key + "_error"] = (("wavenumber", "emf_component", "mean_component"), e[key],
                                   f"uncertainty of {key} (NaN: direct steady solve)")
        out["beta_K" + sfx] = (("wavenumber", "emf_component", "mean_component"), result.beta(soca),
                               f"{label}beta_ijs(K) with s = {AXES[result.axis]}: beta_ijs = -eta_il eps_lsj")
        a, h = result.horizontal(soca)
        out["alpha_horizontal" + sfx] = (("wavenumber",), a, f"{label}(alpha_{perp[0]}{perp[0]} + alpha_{perp[1]}{perp[1]})/2")
        out["eta_t" + sfx] = (("wavenumber",), h, f"{label}(eta_{perp[0]}{perp[0]} + eta_{perp[1]}{perp[1]})/2")
    outcome = result.time_outcome
    if outcome is not None:
        rec = outcome.record
        out["block_time"] = (("block",), rec.end_times, "simulation time at the end of each averaging block")
        out["block_valid"] = (("block",), np.asarray(rec.valid, float), "1 if the block enters the averages")
        out["block_log_energy"] = (("block",), rec.log_energy,
                                   "ln of the summed energy <|b|^2>/2 of the full test solutions at the block end")
        for name in ("alpha_K", "eta_K", "alpha"):
            if name in rec.values:
                dims = ("block", "emf_component", "field_component") if name == "alpha" else \
                    ("block", "wavenumber", "emf_component", "mean_component")
                out["block_" + name] = (dims, rec.arrays(name), f"{name} of each block (full problem)")
    return out
