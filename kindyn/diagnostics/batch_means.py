"""Standard errors of time averages of correlated samples by batch means (one helper for every driver).

For samples ``v_1 .. v_N`` (rows of an array ``(N, ...)``) the batches of ``b`` consecutive
samples have means whose scatter gives the standard error of the overall mean,
``std(batch means, ddof=1) / sqrt(batches)``. While batches are shorter than the correlation time
this underestimates the error, and it grows with ``b``; the estimate taken is the largest over
``b = b_0, 2 b_0, 4 b_0, ...`` with enough batches (Flyvbjerg & Petersen 1989, J. Chem. Phys. 91,
461, recalled from memory; common practice in time-series averaging).
"""

from __future__ import annotations

import math

import numpy as np


def batch_means_error(values, first_batch: int = 1, min_batches: int = 4,
                      first_min_batches: int | None = None) -> tuple[np.ndarray, int]:
    """``(error, batches)``: the largest batch-means standard error (elementwise for ``(N, ...)``
    samples) over batch sizes ``first_batch * 2^j`` with at least ``min_batches`` batches (the first
    size needs only ``first_min_batches``, default ``min_batches``), and the number of batches of
    the size that gave the largest error. ``inf`` (and the batch count of the first size) when no
    size qualifies."""
    values = np.asarray(values, float)
    n = values.shape[0]
    size = max(1, int(first_batch))
    first_min = min_batches if first_min_batches is None else first_min_batches
    worst, used = np.zeros(values.shape[1:]), 0
    needed = max(2, first_min)
    while n // size >= needed:
        batches = n // size
        means = values[: batches * size].reshape(batches, size, *values.shape[1:]).mean(axis=1)
        error = means.std(axis=0, ddof=1) / math.sqrt(batches)
        if used == 0 or np.max(error) >= np.max(worst):
            used = batches
        worst = np.maximum(worst, error)
        size *= 2
        needed = max(2, min_batches)
    if not used:
        return np.full(values.shape[1:], np.inf), n // max(1, int(first_batch))
    return worst, used
