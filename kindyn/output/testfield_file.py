"""The netCDF record of a test-field calibration (``kindyn testfield``), CF-1.8.

Dimensions and coordinates: ``K`` (test-field wavenumber, an index coordinate), the labelled
tensor-component dimensions ``emf_component`` (row ``i``), ``field_component`` (column ``j`` of
the uniform-field alpha and of ``beta_ijk``), ``derivative_component`` (``k`` of ``beta_ijk``),
``current_component`` (``l`` of ``eta_il``), ``vector_component`` (gamma, delta),
``mean_component`` (the two components perpendicular to the case's averaging axis) and
``averaging_axis`` (x, y, z): each an integer index coordinate with a text label coordinate
``<dim>_label`` named in the ``coordinates`` attribute of the variables that use it
(:func:`kindyn.output.netcdf.add_labelled_dimension`). Coefficients are dimensionless in the case's
units (``units = "1"``). Variables (row ``i`` = EMF component; see the ``sign_convention``
attributes):

* ``alpha``, ``alpha_soca`` (+ ``_error``): ``(emf_component, field_component)`` from the uniform test
  fields (box average), when computed;
* ``alpha_K``, ``eta_K``, ``beta_K`` (+ ``_error``, ``_soca``): ``(K, emf_component, mean_component)``
  for the case's averaging axis (``beta_K`` is ``beta_ijs``); ``alpha_horizontal``, ``eta_t`` (and
  ``_soca``, ``_error``): in-plane means of the diagonals versus K;
* every averaging direction computed: ``alpha_K_by_axis``, ``eta_K_by_axis`` (+ ``_error``, ``_soca``)
  ``(averaging_axis, K, emf_component, field_component)`` (NaN in the column of the averaging axis
  itself and for directions not computed), ``eta_t_by_axis``, ``finding_by_axis`` (flag: negative
  eddy or total diffusivity);
* Rädler's decomposition (:mod:`kindyn.testfield.full_set`; + ``_error``, ``_soca``): ``alpha_sym`` and
  ``gamma`` (uniform fields), ``gamma_K``, ``delta_planar`` ``(K, vector_component)``,
  ``beta_ijk`` ``(K, emf_component, field_component, derivative_component)`` with the flag
  ``beta_ijk_determined``; with all three directions ``eta_ij``, ``beta_sym``
  ``(K, emf_component, current_component)``, ``delta`` and ``kappa``;
* for time-stepped runs, the block series ``block_time``, ``block_valid`` (flag),
  ``block_log_energy`` and ``block_alpha_K``/``block_eta_K`` (and ``block_alpha``);
* for an ensemble, ``member`` (index) with ``member_flow_seed`` and ``member_alpha_K``,
  ``member_eta_K`` (and ``member_alpha``), the per-realisation values.

NaN marks what is not determined (never zeros); direct steady solves have NaN errors (no statistical
error; see the ``solver`` attribute). Global attributes: the provenance every kindyn file carries
(version, command, case text and resolved case), the conventions, cautions, findings, kernel fits and
the closure check.
"""

from __future__ import annotations

import numpy as np

from kindyn.output.netcdf import (add_flag, add_index, add_labelled_dimension, add_time, add_variable, atomic_dataset,
                                  provenance_attributes, set_attributes)

AXES = "xyz"
LABELLED = {
    "emf_component": "component i of the mean electromotive force",
    "field_component": "component j of the mean field (test field)",
    "derivative_component": "direction k of the derivative d_k Bbar_j",
    "current_component": "component l of the mean current J = curl Bbar",
    "vector_component": "vector component",
    "averaging_axis": "axis along which the planar mean fields vary (average over the other two)",
}
FINDINGS = ("none", "negative_eddy_diffusivity", "negative_total_diffusivity")


class Variable:
    """One variable of the file: dimensions, data, long_name; ``meanings`` makes it a flag."""

    def __init__(self, dims, data, long_name, meanings=None, dtype="f8", **extra):
        self.dims, self.data, self.long_name, self.meanings, self.dtype, self.extra = \
            tuple(dims), data, long_name, meanings, dtype, extra


def write_testfield_file(path, case, summary: dict, variables: dict, attributes: dict, K, mean_components,
                         command=None, members: int | None = None) -> None:
    """Write ``variables`` (name -> :class:`Variable`) and attributes to ``path`` atomically.

    ``summary`` (the JSON summary) is stored as ``result_*`` attributes (scalars only); ``K`` are the
    wavenumbers and ``mean_components`` the labels of the case axis's two perpendicular components.
    """
    used = {d for v in variables.values() for d in v.dims}
    with atomic_dataset(path) as ds:
        set_attributes(ds, {
            **provenance_attributes(case, f"kindyn test-field coefficients: {case.name}", command),
            **attributes,
            **{f"result_{k}": v for k, v in summary.items() if not isinstance(v, (list, dict))},
        })
        ds.createDimension("K", len(K))
        add_variable(ds, "K", ("K",), np.asarray(K, float), long_name="test-field wavenumber K")
        labels = {}
        for dim, text in LABELLED.items():
            if dim in used:
                labels[dim] = add_labelled_dimension(ds, dim, list(AXES), text)
        if "mean_component" in used:
            labels["mean_component"] = add_labelled_dimension(
                ds, "mean_component", list(mean_components),
                "mean-field component perpendicular to the averaging axis")
        if "block" in used:
            n = next(len(v.data) for v in variables.values() if v.dims[:1] == ("block",))
            add_index(ds, "block", n, "averaging block")
        if "member" in used:
            add_index(ds, "member", int(members or 0), "realisation of the random flow (flow seed first_seed + member)")
        for name, v in variables.items():
            coordinates = " ".join(labels[d] for d in v.dims if d in labels)
            extra = dict(v.extra)
            if coordinates:
                extra["coordinates"] = coordinates
            if name == "block_time":
                add_time(ds, name, "block", np.asarray(v.data, float), long_name=v.long_name)
            elif v.meanings is not None:
                add_flag(ds, name, v.dims, v.data, v.long_name, meanings=v.meanings, **extra)
            else:
                add_variable(ds, name, v.dims, np.asarray(v.data, float if v.dtype == "f8" else v.dtype),
                             long_name=v.long_name, dtype=v.dtype, **extra)


def _by_axis(result, base: str, soca: bool, errors: bool) -> np.ndarray:
    """``(3, nK, 3, 3)``: the planar tensors of every direction with NaN in the column of the axis."""
    out = np.full((3, len(result.K), 3, 3), np.nan)
    for s in result.directions:
        perp = [j for j in range(3) if j != s]
        out[s][:, :, perp] = result.planar(base, s, soca, errors)
    return out


def result_variables(result) -> dict:
    """The variables of a :class:`~kindyn.testfield.calibration.TestFieldResult` (module docstring)."""
    out = {}
    t, e = result.tensors, result.errors
    perp = "".join(AXES[j] for j in range(3) if j != result.axis)
    tensor = ("emf_component", "field_component")
    if "alpha" in t:
        for name in ("alpha", "alpha_soca"):
            label = "SOCA " if name.endswith("soca") else ""
            out[name] = Variable(tensor, t[name], f"{label}alpha_ij from uniform test fields (box average)")
            out[name + "_error"] = Variable(tensor, e[name], f"uncertainty of {name} (NaN: direct steady solve)")
    planar = ("K", "emf_component", "mean_component")
    for soca in (False, True):
        sfx = "_soca" if soca else ""
        label = "SOCA " if soca else ""
        for name, what in (("alpha_K", "alpha_ij"), ("eta_K", "eta_ij")):
            key = name + sfx
            out[key] = Variable(planar, t[key], f"{label}{what}(K), planar average along {AXES[result.axis]}; "
                                                f"columns j = {perp[0]}, {perp[1]}")
            out[key + "_error"] = Variable(planar, e[key], f"uncertainty of {key} (NaN: direct steady solve)")
        out["beta_K" + sfx] = Variable(planar, result.beta(soca),
                                       f"{label}beta_ijs(K) with s = {AXES[result.axis]}: beta_ijs = -eta_il eps_lsj")
        a, h = result.horizontal(soca)
        ea, eh = result.horizontal_errors(soca)
        out["alpha_horizontal" + sfx] = Variable(("K",), a, f"{label}(alpha_{perp[0]}{perp[0]} + "
                                                            f"alpha_{perp[1]}{perp[1]})/2")
        out["alpha_horizontal" + sfx + "_error"] = Variable(("K",), ea, f"uncertainty of alpha_horizontal{sfx} "
                                                                        "(upper bound)")
        out["eta_t" + sfx] = Variable(("K",), h, f"{label}(eta_{perp[0]}{perp[0]} + eta_{perp[1]}{perp[1]})/2")
        out["eta_t" + sfx + "_error"] = Variable(("K",), eh, f"uncertainty of eta_t{sfx} (upper bound)")
        by_axis = ("averaging_axis", "K", "emf_component", "field_component")
        for base in ("alpha_K", "eta_K"):
            what = "alpha_ij(K)" if base == "alpha_K" else "eta_il(K) (column l = current component)"
            out[base + "_by_axis" + sfx] = Variable(
                by_axis, _by_axis(result, base, soca, False),
                f"{label}{what} of the planar averages along each axis (NaN: column of the axis itself, or "
                "direction not computed)")
            out[base + "_by_axis" + sfx + "_error"] = Variable(by_axis, _by_axis(result, base, soca, True),
                                                               f"uncertainty of {base}_by_axis{sfx}")
        eta_t = np.full((3, len(result.K)), np.nan)
        for s in result.directions:
            eta_t[s] = result.horizontal(soca, axis=s)[1]
        out["eta_t_by_axis" + sfx] = Variable(("averaging_axis", "K"), eta_t,
                                              f"{label}eddy diffusivity eta_t(K): in-plane mean of the diagonal of "
                                              "eta_il for each averaging axis")
    out.update(_full_set_variables(result))
    flags = np.zeros((3, len(result.K)), np.int8)
    for f in result.findings:
        if f["direction"] in AXES and f["kind"] in FINDINGS:
            s, n = AXES.index(f["direction"]), int(np.argmin(np.abs(result.K - f["K"])))
            flags[s, n] = max(flags[s, n], FINDINGS.index(f["kind"]))
    out["finding_by_axis"] = Variable(("averaging_axis", "K"), flags,
                                      "findings: eta_t < 0 (negative eddy diffusivity), eta + eta_t < 0 (mean "
                                      "fields grow without alpha); see the attribute findings for errors",
                                      meanings=FINDINGS)
    outcome = result.time_outcome
    if outcome is not None:
        rec = outcome.record
        out["block_time"] = Variable(("block",), rec.end_times, "simulation time at the end of each averaging block")
        out["block_valid"] = Variable(("block",), np.asarray(rec.valid, int), "whether the block enters the averages",
                                      meanings=("excluded_settling", "valid"))
        out["block_log_energy"] = Variable(("block",), rec.log_energy,
                                           "ln of the summed energy <|b|^2>/2 of the full test solutions at the "
                                           "block end")
        for name in ("alpha_K", "eta_K", "alpha"):
            if name in rec.values:
                dims = ("block", *tensor) if name == "alpha" else ("block", *planar)
                out["block_" + name] = Variable(dims, rec.arrays(name), f"{name} of each block (full problem)")
    return out


def _full_set_variables(result) -> dict:
    """Rädler's decomposition (:mod:`kindyn.testfield.full_set`) with errors and SOCA."""
    from_dims = {
        "alpha_sym": (("emf_component", "field_component"), "symmetric alpha_ij = (a_ij + a_ji)/2 (uniform fields)"),
        "gamma": (("vector_component",), "pumping gamma_i = -eps_ijk a_jk/2 (uniform fields, K = 0)"),
        "gamma_K": (("K", "vector_component"),
                    "pumping gamma_s(K) = -eps_spq (a_pq - a_qp)/2 from the in-plane alpha of the averages "
                    "along s (component s; NaN: direction not computed)"),
        "delta_planar": (("K", "vector_component"),
                         "planar antisymmetric eta, (eta_qp - eta_pq)/2 for (p, q, s) cyclic = delta_s - "
                         "(kappa_pps + kappa_qqs)/2 (component s)"),
        "beta_ijk": (("K", "emf_component", "field_component", "derivative_component"),
                     "beta_ijk(K) of Ebar_i = a_ij Bbar_j + beta_ijk d_k Bbar_j (NaN: not determined, see "
                     "beta_ijk_determined)"),
        "eta_ij": (("K", "emf_component", "current_component"),
                   "eta_il(K) = eps_ljk beta_ijk/2: Ebar = ... - eta . curl Bbar"),
        "beta_sym": (("K", "emf_component", "current_component"), "symmetric beta_ij(K) = (eta_ij + eta_ji)/2"),
        "delta": (("K", "vector_component"), "Raedler delta_i(K) = -eps_ijk eta_jk/2 (term -delta x curl Bbar)"),
        "kappa": (("K", "emf_component", "field_component", "derivative_component"),
                  "kappa_ijk(K) = -(beta_ijk + beta_ikj)/2 (term -kappa_ijk (grad Bbar)^(s)_jk; NaN for j = k: "
                  "not determined)"),
    }
    out = {}
    for key, (dims, text) in from_dims.items():
        for sfx, label in (("", ""), ("_soca", "SOCA ")):
            name = key + sfx
            if name not in result.full_set:
                continue
            out[name] = Variable(dims, result.full_set[name], label + text)
            err = result.full_set_errors.get(name)
            if err is not None:
                out[name + "_error"] = Variable(dims, err, f"uncertainty of {name} (NaN: direct steady solve or not "
                                                           "determined)")
    if "beta_ijk" in result.full_set:
        determined = np.isfinite(np.asarray(result.full_set["beta_ijk"], float)).all(axis=0)
        out["beta_ijk_determined"] = Variable(("emf_component", "field_component", "derivative_component"),
                                              determined.astype(int),
                                              "whether the averaging directions computed determine beta_ijk",
                                              meanings=("not_determined", "determined"))
    return out


def ensemble_variables(members: list, seeds) -> dict:
    """Per-realisation ``alpha_K``, ``eta_K`` (and ``alpha``) of an ensemble (``members``: tensor dicts)."""
    out = {"member_flow_seed": Variable(("member",), np.asarray(seeds), "flow seed of the realisation", dtype="i8")}
    dims = {"alpha_K": ("member", "K", "emf_component", "mean_component"),
            "eta_K": ("member", "K", "emf_component", "mean_component"),
            "alpha": ("member", "emf_component", "field_component")}
    for name, d in dims.items():
        if all(m.get(name) is not None for m in members):
            out["member_" + name] = Variable(d, np.stack([np.asarray(m[name], float) for m in members]),
                                             f"{name} of each realisation (full problem)")
    return out
