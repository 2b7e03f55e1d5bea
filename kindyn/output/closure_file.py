"""The netCDF record of ``kindyn closure``: predicted growth rates of mean-field modes beside direct runs.

Dimensions: ``K`` (mean-field wavenumber, an index coordinate) and ``prediction`` (an integer index
with the label coordinate ``prediction_label``: measured, measured_matrix, soca, soca_matrix,
local, memory, memory_soca; :mod:`kindyn.testfield.scales` says what each is). Variables
(dimensionless, in the case's units): ``growth_rate(prediction, K)`` and its ``_error`` (NaN: none
statistical or not computed), ``direct_growth_rate(K)`` and ``_error`` (NaN: no direct run),
``direct_box_length``, ``direct_box_scale_mean_share``, ``relative_difference(prediction, K)`` =
``(p - p_direct)/|p_direct|``, ``difference_in_errors`` = ``|p - p_direct|/sqrt(err^2 + err_direct^2)``,
the flag ``closure_holds(prediction, K)`` (0 no, 1 yes, 2 not available), ``scale_separation``
``k_f/K``, ``soca_expected_departure`` (``p_soca - p_measured``) and the test-field coefficients used
(``alpha_horizontal``, ``eta_t`` and SOCA). Global attributes: the provenance every kindyn file
carries, the labels' meanings, the local closure's coefficients, notes.
"""

from __future__ import annotations

import json

import numpy as np

from kindyn.output.netcdf import (add_flag, add_labelled_dimension, add_variable, atomic_dataset,
                                  provenance_attributes, set_attributes)


def write_closure_file(path, case, table: dict, attributes: dict, command=None) -> None:
    """``table``: ``K``, ``predictions`` (ordered names), ``labels`` (name -> meaning) and arrays
    ``growth_rate`` ``(P, nK)``, ``growth_rate_error``, ``relative_difference``, ``difference_in_errors``,
    ``closure_holds`` (-1 = n/a), ``direct_growth_rate`` ``(nK,)``, ``direct_growth_rate_error``,
    ``direct_box_length``, ``direct_box_scale_mean_share``, ``scale_separation``,
    ``soca_expected_departure``, ``alpha_horizontal``, ``eta_t``, ``alpha_horizontal_soca``, ``eta_t_soca``."""
    names = list(table["predictions"])
    with atomic_dataset(path) as ds:
        set_attributes(ds, {
            **provenance_attributes(case, f"kindyn closure across scales: {case.name}", command),
            "predictions": json.dumps(table["labels"]),
            **attributes,
        })
        ds.createDimension("K", len(table["K"]))
        add_variable(ds, "K", ("K",), np.asarray(table["K"], float), long_name="mean-field wavenumber K")
        label = add_labelled_dimension(ds, "prediction", names, "growth-rate prediction (closure)")
        per = ("prediction", "K")
        add_variable(ds, "growth_rate", per, table["growth_rate"], long_name="predicted growth rate p(K) of the "
                     "mean-field mode", coordinates=label)
        add_variable(ds, "growth_rate_error", per, table["growth_rate_error"],
                     long_name="uncertainty of the prediction (NaN: none statistical, or not computed)",
                     coordinates=label)
        add_variable(ds, "relative_difference", per, table["relative_difference"],
                     long_name="(p - p_direct)/|p_direct|", coordinates=label)
        add_variable(ds, "difference_in_errors", per, table["difference_in_errors"],
                     long_name="|p - p_direct| / sqrt(error^2 + direct error^2)", coordinates=label)
        holds = np.where(np.asarray(table["closure_holds"]) < 0, 2, table["closure_holds"])
        add_flag(ds, "closure_holds", per, holds, "whether the prediction agrees with the direct run within "
                 f"{table['sigmas']:g} combined errors", meanings=("no", "yes", "not_available"), coordinates=label)
        for name, text in (("direct_growth_rate", "growth rate of the direct run in the box with L = 2 pi/K (NaN: "
                                                  "no such box holds the flow)"),
                           ("direct_growth_rate_error", "uncertainty of the direct run's growth rate"),
                           ("direct_box_length", "length of the direct run's box along the averaging axis"),
                           ("direct_box_scale_mean_share", "share of the direct run's mode energy in the box-scale "
                                                           "planar mean field"),
                           ("scale_separation", "k_f / K"),
                           ("soca_expected_departure", "p_soca - p_measured: the departure of SOCA that its "
                                                       "coefficients imply"),
                           ("alpha_horizontal", "measured alpha(K): in-plane mean of the diagonal"),
                           ("eta_t", "measured eta_t(K): in-plane mean of the diagonal"),
                           ("alpha_horizontal_soca", "SOCA alpha(K)"),
                           ("eta_t_soca", "SOCA eta_t(K)")):
            add_variable(ds, name, ("K",), np.asarray(table[name], float), long_name=text)
