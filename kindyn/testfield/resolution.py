"""The resolution check of the test-field method: the test solutions' spectra and the diffusive scale.

Two criteria, the same as a growth run's (:mod:`kindyn.run`), each enough to flag the result:

1. **spectrum**: the largest :func:`~kindyn.diagnostics.spectra.cutoff_ratio` over the full test
   solutions ``b`` (energy in the last fully kept shell over the peak shell energy), against
   ``run.resolution_threshold``. Direct steady solves: of the steady solutions
   (:func:`solution_cutoff_ratio`); time stepping: averaged over the second half of the valid
   blocks (:attr:`kindyn.testfield.averaging.TimeOutcome.cutoff_ratio`).
2. **diffusive scale**: ``k_cut sqrt(eta/|grad u|_rms) >= 1``
   (:mod:`kindyn.diagnostics.resolution`; it looks at the flow only).

Both leave out an axis along which the flow is uniform
(:func:`kindyn.diagnostics.resolution.counted_axes`; its Fourier sectors are decoupled and exact).
"""

from __future__ import annotations

import numpy as np

from kindyn.diagnostics.resolution import counted_axes, diffusive_resolution, resolution_flags
from kindyn.diagnostics.spectra import cutoff_ratio


def solution_cutoff_ratio(b_hat: np.ndarray, layout, flow=None) -> float:
    """The largest cut-off ratio over the test solutions stacked in ``b_hat`` ``(3 n, ...)``."""
    axes = counted_axes(flow, layout) if flow is not None else (0, 1, 2)
    b_hat = np.asarray(b_hat)
    return max((cutoff_ratio(b_hat[3 * i:3 * i + 3], layout, axes) for i in range(b_hat.shape[0] // 3)),
               default=0.0)


def resolution_check(case, layout, ratio: float) -> dict:
    """Both criteria for the test problems of ``case`` on ``layout`` with the test solutions' cut-off
    ``ratio``: a dict for the result and its files (``resolution_warning``, ``resolution_flags``,
    ``cutoff_ratio``, ``diffusive_scale``, ``diffusive_resolution``, ``resolution_caution``: the
    sentences to show, "" when resolved)."""
    threshold = case.run.resolution_threshold
    diffusive = diffusive_resolution(case.flow, layout, case.eta, counted_axes(case.flow, layout))
    ratio = float(ratio) if ratio is not None and np.isfinite(ratio) else 0.0
    flags, caution = resolution_flags(ratio, threshold, diffusive, "spectrum of the test solutions",
                                      "test-field method")
    return {"resolution_warning": bool(flags), "resolution_flags": list(flags), "cutoff_ratio": ratio,
            "resolution_threshold": threshold, **diffusive.as_dict(), "resolution_caution": caution}
