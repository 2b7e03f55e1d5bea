"""The netCDF summary of ``kindyn ensemble``: one growth rate per realisation of a random flow.

Contents (dimension ``member``, with an index coordinate): ``flow_seed``, ``growth_rate``,
``growth_rate_error`` (NaN where a member has no error estimate), the flags ``converged`` and
``resolution_warning`` (bytes with ``flag_values``/``flag_meanings``), ``cutoff_ratio`` and the
member files (``output``, text); global attributes: the provenance every kindyn file carries (of
the base case: its file, text, overrides, resolved values, the command), the ensemble statistics
(prefixed ``result_``) and the members' cautions (``caution``). Rates are dimensionless, in the
case's units (CF-1.8, see :mod:`kindyn.output.netcdf`).
"""

from __future__ import annotations

import numpy as np

from kindyn.output.netcdf import (add_flag, add_index, add_strings, add_variable, atomic_dataset,
                                  provenance_attributes, set_attributes)


def write_ensemble_file(path, case, result: dict, command=None) -> None:
    """Write the ensemble ``result`` (the JSON summary of :mod:`kindyn.commands.ensemble`, with its
    ``members``) of the base ``case`` to ``path`` atomically."""
    members = result["members"]

    def column(key):
        return np.asarray([np.nan if m[key] is None else float(m[key]) for m in members], float)

    with atomic_dataset(path) as ds:
        set_attributes(ds, {
            **provenance_attributes(case, f"kindyn ensemble of {case.name}", command),
            "caution": "; ".join(result["cautions"]),
            "realisations": "member i is the case with flow.seed = first_seed + i",
            **{f"result_{k}": v for k, v in result.items() if k not in ("members", "cautions")},
        })
        add_index(ds, "member", len(members), "realisation index")
        add_variable(ds, "flow_seed", ("member",), np.asarray([m["seed"] for m in members]), dtype="i8",
                     long_name="flow seed of the realisation")
        add_variable(ds, "growth_rate", ("member",), column("growth_rate"),
                     long_name="amplitude growth rate gamma of the realisation")
        add_variable(ds, "growth_rate_error", ("member",), column("growth_rate_error"),
                     long_name="estimation uncertainty of gamma within the run (NaN: no estimate)")
        add_flag(ds, "converged", ("member",), [int(m["converged"]) for m in members],
                 "1 when the run's estimate converged", meanings=("not_converged", "converged"))
        add_flag(ds, "resolution_warning", ("member",), [int(m["resolution_warning"]) for m in members],
                 "1 when the realisation may be under-resolved (see the attribute caution)",
                 meanings=("resolved", "possibly_under_resolved"))
        add_variable(ds, "cutoff_ratio", ("member",), column("cutoff_ratio"),
                     long_name="magnetic spectrum at the dealiasing cut-off over its peak")
        add_strings(ds, "output", ("member",), [m.get("output") or "" for m in members],
                    "netCDF record of the realisation")
