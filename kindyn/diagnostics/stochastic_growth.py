"""Growth rate of a run in a random, time-dependent flow, with a block-averaged error.

The snapshot (DMD) and harmonic fits of :mod:`kindyn.diagnostics.growth` assume a time-invariant or
time-periodic operator. In a renovating or finite-correlation-time flow the field is multiplied by a
random operator at every instant, and the growth rate is the Lyapunov exponent
``gamma = lim (1/2t) ln E(t)``. With samples ``y_j = ln E(t_j)`` at equal intervals ``dt_s`` (renewal
times for a renovating flow, so that every increment spans whole renewals), over the trailing half of
the record (the first half is left to transients)::

    gamma = (y_end - y_start) / (2 (t_end - t_start)) = mean(d_j) / (2 dt_s),   d_j = y_{j+1} - y_j.

The increments are correlated over a few correlation times, so the standard error comes from block
averages (Flyvbjerg & Petersen 1989, J. Chem. Phys. 91, 461): blocks of ``b`` increments spanning at
least :data:`BLOCK_CORRELATION_TIMES` correlation times, then doubled while at least ``min_blocks``
blocks remain; the error is the largest ``std(block means)/sqrt(blocks)/(2 dt_s)`` over these block
sizes. The estimate is *converged* when at least ``min_blocks`` blocks exist, the error is below the
tolerance, and the two halves of the window agree within four combined standard errors (no drift).
"""

from __future__ import annotations

import math

import numpy as np

from kindyn.diagnostics.batch_means import batch_means_error

from kindyn.diagnostics.growth import GrowthEstimate

BLOCK_CORRELATION_TIMES = 4.0
MIN_BLOCKS = 10
DRIFT_SIGMAS = 4.0


def renewal_samples(times: np.ndarray, renewal_time: float) -> np.ndarray:
    """Indices of the samples taken at whole multiples of ``renewal_time``."""
    ratio = np.asarray(times, float) / renewal_time
    return np.flatnonzero(np.abs(ratio - np.rint(ratio)) <= 1e-6 * np.maximum(1.0, ratio))


def block_error(increments: np.ndarray, first_block: int, min_blocks: int) -> tuple[float, int]:
    """Largest standard error of the mean increment over block sizes ``b, 2b, 4b, ...``
    (:func:`kindyn.diagnostics.batch_means.batch_means_error`)."""
    error, blocks = batch_means_error(increments, first_block, min_blocks)
    return float(error), blocks


def estimate_stochastic_growth(times, log_energy, tolerance: float, renewal_time: float | None = None,
                               correlation_time: float | None = None,
                               min_blocks: int = MIN_BLOCKS) -> GrowthEstimate:
    """Growth rate and block-averaged error (module docstring). Frequency is not defined (NaN)."""
    t = np.asarray(times, float)
    y = np.asarray(log_energy, float)
    if renewal_time:
        keep = renewal_samples(t, renewal_time)
        t, y = t[keep], y[keep]
    M = t.size
    start = M // 2
    if M - start < 2 * min_blocks + 1:
        return GrowthEstimate(math.nan, math.inf, math.nan, False, math.nan,
                              (float(t[0]) if M else 0.0, float(t[-1]) if M else 0.0), M - start,
                              "too few samples yet")
    tw, yw = t[start:], y[start:]
    dt = float(np.mean(np.diff(tw)))
    increments = np.diff(yw)
    gamma = float(increments.mean()) / (2 * dt)
    memory = renewal_time or correlation_time or dt
    first_block = max(1, math.ceil(BLOCK_CORRELATION_TIMES * memory / dt - 1e-9))
    error, blocks = block_error(increments, first_block, min_blocks)
    error /= 2 * dt
    half = increments.size // 2
    g1 = float(increments[:half].mean()) / (2 * dt)
    g2 = float(increments[half:].mean()) / (2 * dt)
    # each half has error ~ sqrt(2) error, so their difference has ~ 2 error
    drift = abs(g1 - g2) > DRIFT_SIGMAS * 2 * error if math.isfinite(error) else True
    enough = blocks >= min_blocks and math.isfinite(error)
    converged = bool(enough and not drift and error <= tolerance)
    if not enough:
        note = f"fewer than {min_blocks} blocks of {first_block} samples ({BLOCK_CORRELATION_TIMES:g} correlation times)"
    elif drift:
        note = f"the window's halves disagree ({g1:.4g} vs {g2:.4g}): transient not over"
    elif not converged:
        note = f"uncertainty {error:.3g} above tolerance {tolerance:.3g}"
    else:
        note = f"stochastic estimate: block-averaged ln E increments, {blocks} blocks"
    # a standard error from batch means is already a calibrated uncertainty (Flyvbjerg & Petersen)
    return GrowthEstimate(gamma, error, math.nan, converged, math.nan, (float(tw[0]), float(tw[-1])),
                          int(increments.size + 1), note, uncertainty=error, fit_error=error)


def estimate_for_flow(times, log_energy, tolerance: float, flow) -> GrowthEstimate:
    """:func:`estimate_stochastic_growth` with the flow's ``renewal_time`` and ``correlation_time``."""
    return estimate_stochastic_growth(times, log_energy, tolerance, getattr(flow, "renewal_time", None),
                                      getattr(flow, "correlation_time", None))
