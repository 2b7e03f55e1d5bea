"""The ``[sweep]`` section of a case file, checked against the methods of the sweep package.

The section's syntax (swept keys, ranges, options) and its validated form :class:`SweepSpec` live in
the case package (:mod:`kindyn.case.sweep_section`, which documents the keys), below the drivers;
:func:`validate_sweep` here adds the check of ``method`` against :data:`kindyn.sweep.methods.METHODS`.
"""

from __future__ import annotations

from kindyn.case import sweep_section
from kindyn.case.sweep_section import (COMBINATIONS, NO_SWEEP, OPTION_DEFAULTS, RANGE_KEYS, SIGNIFICANT_DIGITS,
                                       SPACINGS, SweepSpec, check_swept_key, round_value, swept_values)

__all__ = ["COMBINATIONS", "NO_SWEEP", "OPTION_DEFAULTS", "RANGE_KEYS", "SIGNIFICANT_DIGITS", "SPACINGS",
           "SweepSpec", "check_swept_key", "round_value", "swept_values", "validate_sweep"]


def validate_sweep(raw, file: str) -> SweepSpec:
    """:func:`kindyn.case.sweep_section.validate_sweep` with ``method`` one of the registered methods."""
    from kindyn.sweep.methods import METHODS

    return sweep_section.validate_sweep(raw, file, methods=tuple(METHODS))
