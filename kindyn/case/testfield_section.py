"""The ``[testfield]`` case section: keys, types, defaults and meanings.

The loader checks types and ranges here; what needs the box and the flow (test-field wavenumbers
that fit the box and survive dealiasing, a steady method for a steady flow) is checked by
:func:`kindyn.testfield.settings.plan_from_case` before any computation. Time stepping reuses
``[run] scheme``, ``cfl`` and ``time_step``.
"""

from __future__ import annotations

import dataclasses

from dataclasses import dataclass

from kindyn.case.schema import (SectionConfig, boolean, bounded_integer, choice, fraction_below, list_of, non_negative,
                                positive, positive_integer, setting)

AXES = ("x", "y", "z")


@dataclass(frozen=True, kw_only=True)
class TestfieldConfig(SectionConfig):
    """``[testfield]``: which test fields, and how their responses are solved and averaged."""

    __test__ = False  # not a pytest class

    axis: str = setting(
        choice(*AXES), "z",
        "averaging axis: mean fields depend on this coordinate only (planar averages over the other two)")
    modes: tuple[int, ...] | None = setting(
        list_of(positive_integer, "whole numbers >= 1"), None,
        "test-field wavenumbers as mode numbers m along the axis, K = 2 pi m / L_axis (default [1])")
    wavenumbers: tuple[float, ...] | None = setting(
        list_of(positive, "positive numbers"), None,
        "test-field wavenumbers K (whole multiples of 2 pi / L_axis); give modes or wavenumbers")
    uniform: bool = setting(boolean, True,
                            "also solve the three uniform test fields (the full 3x3 alpha, box average)")
    method: str = setting(
        choice("auto", "direct", "time"), "auto",
        "auto: direct steady solves for steady flows, time stepping otherwise; "
        "direct: steady solves (steady flows only); time: time stepping")
    reset_interval: float | None = setting(
        positive, None,
        "time between resets of the test solutions to zero (rounded up to whole blocks); default: never reset")
    settle_time: float | None = setting(
        non_negative, None,
        "time after the start and after each reset excluded from averages "
        "(default 5/(eta k_f^2), at most half the reset interval)")
    block_length: float | None = setting(
        positive, None,
        "averaging block (default: one flow period for periodic flows, else 10/(U k_f)); "
        "rounded to whole periods for periodic flows")
    tolerance: float = setting(
        positive, 1e-3,
        "stop when every standard error (change, for steady flows) is below tolerance * U "
        "(alpha) and tolerance * U/k_f (eta)")
    min_time: float = setting(non_negative, 0.0, "never stop the time stepping before this time")
    max_time: float | None = setting(
        positive, None, "stop the time stepping here even if not converged (default: settle + 200 blocks)")
    samples_per_period: int = setting(bounded_integer(1, 100_000), 32,
                                      "EMF samples per flow period (or per block) for time averages")
    solver_tolerance: float = setting(fraction_below(1e-2, "a relative residual"), 1e-11,
                                      "relative residual of the iterative steady solve (GMRES)")
    onset_check: bool = setting(
        boolean, True, "before direct steady solves, check that no test problem has a growing homogeneous mode")
    closure: bool = setting(
        boolean, False, "compare the mean-field growth rate at the box scale with a direct run (kindyn run)")
    all_directions: bool = setting(
        boolean, False,
        "test fields varying along x, along y and along z (the same K on each axis): the full alpha_ij, every "
        "beta_ijk that planar averages determine, and the Raedler decomposition (gamma, beta_ij, delta, kappa)")
    realisations: int = setting(
        bounded_integer(1, 10_000), 1,
        "ensemble of a random flow: coefficients of this many realisations (flow seeds s, s+1, ...), mean, "
        "spread and combined standard error")
    closure_coupling: int = setting(
        bounded_integer(0, 8), 2,
        "kindyn closure: orders of harmonic coupling in the memory-consistent prediction (0: the mode K alone; "
        "n: also the mean-field harmonics reached from K in n steps of the flow's wavenumber along the axis)")

    LATER_KEYS = ("all_directions", "realisations", "closure_coupling")

    def as_dict(self) -> dict:
        """The values, without the keys added after the first fingerprints when they are at their
        defaults, so that a case written before keeps its fingerprint (and its checkpoints and sweep
        points: :attr:`kindyn.case.Case.fingerprint`)."""
        values = super().as_dict()
        for f in dataclasses.fields(self):
            if f.name in self.LATER_KEYS and values[f.name] == f.default:
                del values[f.name]
        return values


TESTFIELD_KEYS = TestfieldConfig.key_table()  # key -> Key, derived from the fields
