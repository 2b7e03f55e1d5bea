"""Helpers of the single-k_z reduction ("planar" method) for flows that do not depend on z.

When ``u = u(x, y, t)`` each vertical wavenumber evolves on its own, ``B = b(x, y, t) exp(i k_z z)``;
the problem at one ``k_z`` is the induction operator on a :class:`~kindyn.layout.KzPlaneLayout`
(built by :func:`kindyn.assemble.build_kz_plane_solver`). A 3-D box of height ``Lz = 2 pi / k_z``
holds exactly the wavenumbers ``m k_z``; its spectrum is the union of the single-k_z spectra at
``k_z = m 2 pi / Lz`` (and their conjugates for ``m < 0``). This module decides whether a flow is
z-independent, chooses the time step of the reduction and measures its resolution.
"""

from __future__ import annotations

import math

import numpy as np

from kindyn.errors import FlowError
from kindyn.layout import KzPlane, KzPlaneLayout
from kindyn.timestep import max_speeds


def is_z_independent(flow, box, times=None, rtol: float = 1e-12) -> bool:
    """Whether ``u`` does not depend on z: the flow's declaration, checked numerically.

    The velocity is sampled on the ``(x, y)`` grid of ``box`` at several heights (the grid's, plus
    off-grid ones) and times (one period, when time-periodic); it is z-independent when every sample
    equals the one at ``z = 0`` to ``rtol`` times ``max |u|``. A flow that declares
    ``z_independent = True`` but fails the check raises :class:`~kindyn.errors.FlowError`; a flow that
    declares nothing (or False) and passes is reported z-independent.
    """
    if times is None:
        period = getattr(flow, "period", None)
        times = [0.0] if (getattr(flow, "steady", False) or not period) else list(np.linspace(0, period, 5)[:-1])
    x, y = box.coordinates[0], box.coordinates[1]
    Lz = box.lengths[2]
    heights = np.concatenate([box.axis(2), Lz * np.array([0.1234567, 0.3819660, 0.7071068])])[None, None, :]
    worst, scale = 0.0, 0.0
    for t in times:
        u = [np.broadcast_to(np.asarray(c, float), (box.grid[0], box.grid[1], heights.size))
             for c in flow.velocity(x, y, heights, t)]
        for c in u:
            scale = max(scale, float(np.max(np.abs(c))))
            worst = max(worst, float(np.max(np.abs(c - c[:, :, :1]))))
    independent = worst <= rtol * max(scale, 1e-300)
    if getattr(flow, "z_independent", None) is True and not independent:
        raise FlowError(f"{type(flow).__name__} declares z_independent = True but its velocity varies with z "
                        f"by {worst:.3g} (max |u| = {scale:.3g})")
    return bool(independent)


def kz_plane_time_step(flow, grid: KzPlane, cfl: float) -> float:
    """Advective CFL step ``cfl / sum_i max|u_i| k_max,i`` with ``k_max,z = |k_z|`` (see :mod:`kindyn.timestep`)."""
    speeds = max_speeds(flow, KzPlaneLayout(grid), getattr(flow, "period", None))
    rate = float(np.dot(speeds, grid.max_kept_wavenumbers))
    return cfl / rate if rate > 0 else math.inf


def kz_plane_cutoff_ratio(b_hat: np.ndarray, grid: KzPlane) -> float:
    """Energy in the last fully kept horizontal shell over the largest shell energy.

    Shells in ``|k_h| = sqrt(k_x^2 + k_y^2)`` of width ``2 pi / max(Lx, Ly)``; ``b_hat`` holds planar
    amplitudes ``(ncomp, nx, ny)`` or ``(ncomp, nx, ny, 1)`` (any number of components, e.g. real
    and imaginary parts stacked). Like :func:`kindyn.diagnostics.spectra.cutoff_ratio`: a ratio that
    is not small means structure the grid cannot hold, and under-resolved solves can show spurious
    growth.
    """
    layout = KzPlaneLayout(grid)
    b_hat = np.asarray(b_hat).reshape(-1, *layout.spectral_shape)
    kx, ky, _ = layout.wavenumbers
    dk = 2 * np.pi / max(grid.lengths)
    shells = np.broadcast_to(np.rint(np.sqrt(kx**2 + ky**2) / dk).astype(int), layout.spectral_shape)
    density = sum(np.abs(c) ** 2 for c in b_hat) * layout.dealias_mask
    spectrum = layout.total(np.bincount(shells.ravel(), weights=np.asarray(density).ravel()))
    last = int(np.floor(min(grid.max_kept_wavenumbers[:2]) / dk + 1e-9))
    peak = spectrum.max() if spectrum.size else 0.0
    if peak <= 0 or last < 1:
        return 0.0
    return float(spectrum[min(last, spectrum.size - 1)] / peak)
