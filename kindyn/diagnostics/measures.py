"""What is measured on a field, kept apart from when it is measured.

A :class:`Measure` is a small object: a name (its netCDF variable), a long_name, units, the
dimensions of one sample, and ``evaluate(layout, b_hat)`` computed from the state through the
layout (:mod:`kindyn.layout`), so that a distributed layout measures the same numbers. Drivers
decide *when* to measure (a run: at every sample, after renormalisation to unit energy); the run
record and its netCDF file are written from these objects, so adding a measured quantity to runs
and to their files is one :class:`Measure` here and one line in :func:`run_series`.

Conventions: ``E_M = <|B|^2>/2`` (volume average, Parseval); shell spectra as in
:mod:`kindyn.diagnostics.spectra`; every quantity of :func:`run_series` is intensive (it does not
change when the field is multiplied by a constant), so it is the same for the renormalised field
as for the true one.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from kindyn.diagnostics.spectra import cutoff_ratio, shell_spectrum


@dataclass(frozen=True)
class Measure:
    """One measured quantity: ``evaluate(layout, b_hat)`` -> a number or an array of shape ``dims``."""

    name: str
    long_name: str
    units: str
    evaluate: Callable
    dims: tuple[str, ...] = ()


def _relative_divergence(layout, b_hat) -> float:
    """``||div B|| / (k_max ||B||)`` (L2 norms by Parseval): round-off for a solenoidal field."""
    kx, ky, kz = layout.wavenumbers
    div = kx * b_hat[0] + ky * b_hat[1] + kz * b_hat[2]
    w = layout.parseval_weights
    num = layout.total(float(np.sum(w * (div.real**2 + div.imag**2))))
    den = layout.mean_square(b_hat)
    k_max = math.sqrt(sum(k**2 for k in layout.max_kept_wavenumbers))
    return math.sqrt(num / den) / k_max if den > 0 and k_max > 0 else 0.0


def cutoff_measure(axes=(0, 1, 2)) -> Measure:
    """The energy in the last fully kept shell over the peak shell energy (the resolution guard);
    ``axes``: the axes whose cut-off counts (leave out one along which the flow is uniform)."""
    return Measure("cutoff_ratio", "magnetic energy in the last fully kept shell over the peak shell energy", "1",
                   lambda layout, b_hat: cutoff_ratio(b_hat, layout, axes))


MAGNETIC_ENERGY = Measure("magnetic_energy", "magnetic energy <|B|^2>/2", "1",
                          lambda layout, b_hat: layout.energy(b_hat))
RELATIVE_DIVERGENCE = Measure("relative_divergence", "L2 norm of div B over k_max times the L2 norm of B", "1",
                              _relative_divergence)
SPECTRUM = Measure("magnetic_energy_spectrum", "shell spectrum of the final (unit-energy) magnetic field", "1",
                   lambda layout, b_hat: shell_spectrum(b_hat, layout)[1], ("wavenumber",))


def run_series(axes) -> tuple[Measure, ...]:
    """The intensive quantities a growth run records at every sample (registration: one line each).

    ``axes``: the axes whose cut-off counts (:func:`kindyn.diagnostics.resolution.counted_axes`); a
    bool is read as ``z_independent`` (``True``: x and y only)."""
    if isinstance(axes, (bool, np.bool_)):
        axes = (0, 1) if axes else (0, 1, 2)
    return (cutoff_measure(tuple(axes)), RELATIVE_DIVERGENCE)
