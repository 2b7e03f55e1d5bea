"""The second resolution criterion: the flow's diffusive scale against the grid's cut-off.

The first criterion (:func:`kindyn.diagnostics.spectra.cutoff_ratio`) looks at the computed field;
it is fooled when the grid is so coarse that the true leading mode cannot exist on it at all: the
run then finds another, smooth mode whose spectrum falls off nicely (the 1:1:1 ABC flow at Rm = 18
on 12^3: gamma = -0.056, cut-off ratio 3e-5, while 32^3 gives -0.0007 with an oscillating mode).
This criterion looks at the flow and eta only, so it cannot be fooled by the field.

A smooth flow stretches the field into sheets and ropes whose thickness is set by the balance of
stretching at rate ``S`` and diffusion: ``l = sqrt(eta/S)``. With ``S`` the rms velocity gradient,
``S^2 = <d_j u_i d_j u_i>`` (= ``epsilon/nu``), ``l`` is the Batchelor scale of a passive field in a
smooth flow (Batchelor 1959, J. Fluid Mech. 5, 113); the kinematic-dynamo field of a smooth flow
concentrates on the same ``Rm^{-1/2}`` scale (Moffatt 1978, *Magnetic Field Generation in
Electrically Conducting Fluids*, CUP, ch. 3; Galloway & Frisch 1986, Geophys. Astrophys. Fluid Dyn.
36, 53, for the ABC flow). A spectral grid must hold that scale:

    k_cut l >= 1,     k_cut = the smallest 2/3-rule cut-off wavenumber of the axes that count,

the criterion used for the Kolmogorov and Batchelor scales in direct simulations (Pope 2000,
*Turbulent Flows*, CUP, section 9.1.2: ``k_max eta_K >= 1``; Yeung, Xu & Sreenivasan 2002,
Phys. Fluids 14, 4178, for the Batchelor scale; both from memory). For the 1:1:1 ABC flow
``|grad u|^2 = 3`` everywhere (derived: each of the six non-zero derivatives is a sine or cosine
of amplitude 1, and they pair to ``sin^2 + cos^2``), so ``l = (3 Rm^2)^{-1/4}``: at Rm = 18,
``k_cut l`` = 0.54, 0.72, 0.90, 1.07, 1.25, 1.79 on 12^3, 14^3, 16^3, 20^3, 24^3, 32^3 (k_cut = 3, 4,
5, 6, 7, 10), where the measured growth rates are off the 32^3 value by 0.055, 0.018, 0.004,
1.4e-4, 1.1e-4 (this module's tests).

Both criteria leave out an axis along which the flow is uniform (:func:`counted_axes`: declared
``z_independent``, or no velocity energy at non-zero mode numbers along that axis on the grid):
the Fourier sectors along it are decoupled and each exact, as in
:func:`~kindyn.diagnostics.spectra.cutoff_ratio`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

DIFFUSIVE_RESOLUTION = 1.0  # k_cut * l must be at least this
TIME_SAMPLES = 8  # velocity samples over a period (periodic flows) or over renewals (renovating flows)


@dataclass(frozen=True)
class DiffusiveResolution:
    """``scale`` = ``l = sqrt(eta / |grad u|_rms)``, ``ratio`` = ``k_cut l``, ``resolved`` = ratio >= threshold."""

    scale: float
    ratio: float
    gradient_rms: float
    k_cut: float
    threshold: float = DIFFUSIVE_RESOLUTION

    @property
    def resolved(self) -> bool:
        return not self.ratio < self.threshold

    def as_dict(self) -> dict:
        return {"diffusive_scale": _finite(self.scale), "diffusive_resolution": _finite(self.ratio),
                "diffusive_resolution_threshold": self.threshold, "velocity_gradient_rms": _finite(self.gradient_rms)}


def _finite(x):
    x = float(x)
    return x if math.isfinite(x) else None


def sample_times(flow) -> list[float]:
    """Times at which the flow is sampled: 0 (steady), a period at ``TIME_SAMPLES`` points (periodic),
    the first ``TIME_SAMPLES`` renewal intervals (renovating), ``TIME_SAMPLES`` correlation times (other
    time-dependent flows)."""
    if flow.steady:
        return [0.0]
    period = getattr(flow, "period", None)
    if period:
        return [period * j / TIME_SAMPLES for j in range(TIME_SAMPLES)]
    tau = getattr(flow, "renewal_time", None) or getattr(flow, "correlation_time", None)
    if tau:
        return [tau * (j + 0.5) for j in range(TIME_SAMPLES)]
    return [0.0]


def velocity_gradient_rms(flow, layout, times=None) -> float:
    """``|grad u|_rms = sqrt(<d_j u_i d_j u_i>)`` averaged (in the mean square) over ``times``: by
    Parseval from the Fourier coefficients of the velocity on the layout's grid."""
    times = sample_times(flow) if times is None else list(times)
    total = 0.0
    for t in times:
        u_hat = layout.spectral_from_physical(layout.sample_velocity(flow, t).astype(layout.real_dtype))
        total += sum(layout.mean_square(k * u_hat) for k in layout.wavenumbers)
    return math.sqrt(total / len(times))


def uniform_axes(flow, layout, times=None, relative: float = 1e-12) -> tuple[int, ...]:
    """Axes along which the flow does not vary: declared (``z_independent``) or measured (the
    velocity's energy at non-zero mode numbers along the axis is below ``relative`` of the total,
    at every sample time)."""
    found = {2} if getattr(flow, "z_independent", False) else set()
    times = sample_times(flow) if times is None else list(times)
    w = layout.parseval_weights
    modes = layout.mode_numbers
    candidates = [i for i in range(3) if i not in found]
    for t in times:
        if not candidates:
            break
        u_hat = layout.spectral_from_physical(layout.sample_velocity(flow, t).astype(layout.real_dtype))
        density = w * sum(c.real ** 2 + c.imag ** 2 for c in u_hat)
        total = float(layout.total(np.sum(density)))
        keep = []
        for i in candidates:
            varying = float(layout.total(np.sum(np.where(np.broadcast_to(modes[i] != 0, density.shape), density, 0.0))))
            if total > 0 and varying <= relative * total:
                keep.append(i)
        candidates = keep
    return tuple(sorted(found | set(candidates)))


def counted_axes(flow, layout) -> tuple[int, ...]:
    """The axes whose cut-off counts for resolution: all but those along which the flow is uniform
    (all three if the flow is uniform everywhere)."""
    uniform = uniform_axes(flow, layout)
    axes = tuple(i for i in range(3) if i not in uniform)
    return axes or (0, 1, 2)


def cutoff_wavenumber(layout, axes=(0, 1, 2)) -> float:
    """The smallest 2/3-rule cut-off wavenumber of ``axes``."""
    return float(min(layout.max_kept_wavenumbers[i] for i in axes))


def diffusive_resolution(flow, layout, eta: float, axes=(0, 1, 2),
                         threshold: float = DIFFUSIVE_RESOLUTION) -> DiffusiveResolution:
    """The criterion of the module docstring for ``flow`` at diffusivity ``eta`` on ``layout``."""
    gradient = velocity_gradient_rms(flow, layout)
    k_cut = cutoff_wavenumber(layout, axes)
    scale = math.sqrt(eta / gradient) if gradient > 0 else math.inf
    return DiffusiveResolution(scale, k_cut * scale, gradient, k_cut, threshold)


def diffusive_caution(check: DiffusiveResolution, what: str = "run") -> str:
    """The sentence shown when the diffusive scale is not resolved."""
    grid = ""
    if check.scale > 0 and math.isfinite(check.scale):
        grid = (f" with k_cut >= {check.threshold / check.scale:.3g} (about {points_for(check.scale, check.threshold)} "
                "points per 2 pi of box length)")
    return (f"the diffusive scale l = sqrt(eta/|grad u|_rms) = {check.scale:.3g} is not resolved: k_cut l = "
            f"{check.ratio:.3g} < {check.threshold:g} (k_cut = {check.k_cut:.3g}); the grid is too coarse, and an "
            f"under-resolved {what} can show spurious growth or find a mode of the truncated problem instead of the "
            f"induction equation's, with a spectrum that looks resolved; repeat on a finer grid{grid}")


def resolution_flags(cutoff_ratio: float, threshold: float, check: DiffusiveResolution | None,
                     spectrum: str = "magnetic spectrum", what: str = "run") -> tuple[list[str], str]:
    """Which criteria trip — ``"spectrum"`` (the ``spectrum`` at the cut-off above ``threshold``)
    and/or ``"diffusive_scale"`` — and the caution that says so ("" when none trips; ``what`` is the
    computation named in it: a run, an eigen-solve, the test-field method)."""
    from kindyn.diagnostics.spectra import resolution_caution

    flags, cautions = [], []
    if cutoff_ratio > threshold:
        flags.append("spectrum")
        cautions.append(resolution_caution(cutoff_ratio, threshold, spectrum))
    if check is not None and not check.resolved:
        flags.append("diffusive_scale")
        cautions.append(diffusive_caution(check, what))
    return flags, "; ".join(cautions)


def points_for(scale: float, threshold: float = DIFFUSIVE_RESOLUTION) -> int:
    """Grid points per ``2 pi`` of box length that resolve ``scale``: ``3 m + 1`` with ``m = ceil(threshold/l)``
    (the 2/3 rule keeps ``|m| < n/3``)."""
    m = math.ceil(threshold / scale - 1e-12)
    return 3 * m + 1
