"""Is a formula or callable flow what the grid holds? Off-grid comparison against the continuous flow.

A flow sampled on an ``n``-point axis is seen only through its samples: a mode ``m = q n + r``
gives the same samples as the mode ``r`` (aliasing), so ``sin(30 y)`` on 24 points IS ``sin(6 y)``
on the grid and passes the band check. Formula and callable flows can be evaluated anywhere, so
kindyn compares the grid's band-limited interpolant with the flow itself between the grid points.

Test (one axis ``a`` at a time): shift the sample points by ``s h_a`` along ``a`` (``s`` =
:data:`SHIFT` of a cell, ``h_a = L_a/n_a``); the interpolant there is, by the shift theorem,

    u_I(x + s h_a e_a) = sum_k u_hat(k) exp(i k_a s h_a) exp(i k.x)     (Nyquist modes of axis a left out)

and for a mode aliased from ``m = q n + r`` it differs from the true value by the factor
``exp(2 pi i q s)``, which is 1 only when ``q s`` is whole (``q`` a multiple of 100 for s = 0.37).
The measured mismatch is the energy share

    mismatch_a = <|u(x + s h_a e_a) - u_I(x + s h_a e_a)|^2> / <|u|^2>

(0 up to round-off for a flow the grid holds); above :data:`ALIAS_TOLERANCE` (the band check's
tolerance, the same measure of what is lost) the flow is refused. The grid needed along ``a`` is
found by sampling the flow on grids refined along ``a`` (``2 n_a, 4 n_a, ...``; see
:func:`points_needed`): the first where the same test passes gives the highest mode
number ``m_a`` carrying more than the tolerance of the energy, and the 2/3 rule then needs
``n_a >= 3 m_a + 1`` points.
"""

from __future__ import annotations

import numpy as np

from kindyn.box import Box
from kindyn.errors import ParameterError
from kindyn.flows.gridded import grid_from_hat, hat_from_grid

ALIAS_TOLERANCE = 1e-6
SHIFT = 0.37
MAX_REFINED_POINTS = 2**21
SIDE_POINTS = 16


def _shifted_interpolant(u_hat: np.ndarray, box, axis: int, shift: float) -> np.ndarray:
    """The trigonometric interpolant at the grid shifted by ``shift`` cells along ``axis``."""
    m, k = box.mode_numbers[axis], box.wavenumbers[axis]
    keep = 2 * np.abs(m) < box.grid[axis]          # the axis's Nyquist mode is ambiguous off the grid
    phase = np.where(keep, np.exp(1j * k * shift * box.spacing[axis]), 0.0)
    return grid_from_hat(u_hat * phase, box.grid)


def axis_mismatch(evaluate, u: np.ndarray, box, axis: int, t: float, u_hat: np.ndarray | None = None) -> float:
    """``mismatch_a`` of the module docstring; ``evaluate(x, y, z, t) -> (3, nx, ny, nz)``, ``u`` the
    sample on the grid of ``box`` (``u_hat`` its half-grid coefficients, computed when not given)."""
    coords = list(box.coordinates)
    coords[axis] = coords[axis] + SHIFT * box.spacing[axis]
    exact = evaluate(*coords, t)
    if u_hat is None:
        u_hat = hat_from_grid(u)
    interpolant = _shifted_interpolant(u_hat, box, axis, SHIFT)
    scale = max(float(np.mean(np.sum(u**2, axis=0))), float(np.mean(np.sum(exact**2, axis=0))))
    if scale == 0:
        return 0.0
    return float(np.mean(np.sum((exact - interpolant) ** 2, axis=0))) / scale


def highest_mode(u_hat: np.ndarray, box, axis: int, tolerance: float = ALIAS_TOLERANCE) -> int:
    """Smallest ``m`` with at most ``tolerance`` of ``<|u|^2>`` in modes ``|m_a| > m`` (half-grid
    coefficients ``u_hat``)."""
    density = np.broadcast_to(box.parseval_weights * sum(np.abs(c) ** 2 for c in u_hat), box.spectral_shape)
    m = np.broadcast_to(np.abs(box.mode_numbers[axis]), box.spectral_shape)
    energy = np.bincount(m.ravel(), weights=density.ravel())
    total = energy.sum()
    if total == 0:
        return 0
    beyond = (total - np.cumsum(energy)) / total          # share in |m_a| > m
    return int(np.argmax(beyond <= tolerance))


def points_needed(evaluate, box, axis: int, t: float) -> int | None:
    """Points along ``axis`` the 2/3 rule needs for the flow (``None`` beyond :data:`MAX_REFINED_POINTS`).

    The flow is sampled on grids refined along ``axis`` (``2 n, 4 n, ...``); the other axes keep at
    most :data:`SIDE_POINTS` points, offset by 0.37 of their spacing (so that no mode of theirs
    vanishes on the sample): aliasing along the other axes folds their mode numbers, never ``m_a``.
    """
    grid = [min(n, SIDE_POINTS) for n in box.grid]
    factor = 2
    while True:
        grid[axis] = box.grid[axis] * factor
        if int(np.prod(grid)) > MAX_REFINED_POINTS:
            return None
        fine = Box(box.lengths, tuple(grid))

        def sample(x, y, z, t, _axis=axis, _fine=fine):
            coords = [c + (0 if i == _axis else SHIFT * _fine.spacing[i]) for i, c in enumerate((x, y, z))]
            return evaluate(*coords, t)

        u = sample(*fine.coordinates, t)
        if axis_mismatch(sample, u, fine, axis, t) <= ALIAS_TOLERANCE:
            need = 3 * highest_mode(hat_from_grid(u), fine, axis) + 1
            if need <= grid[axis]:
                return need
        factor *= 2


def check_aliasing(evaluate, u: np.ndarray, box, t: float) -> None:
    """Refuse a flow whose grid samples are another flow (module docstring)."""
    u_hat = hat_from_grid(u)
    for axis, name in enumerate("xyz"):
        mismatch = axis_mismatch(evaluate, u, box, axis, t, u_hat)
        if mismatch <= ALIAS_TOLERANCE:
            continue
        need = points_needed(evaluate, box, axis, t)
        grid = list(box.grid)
        if need is None:
            side = [min(n, SIDE_POINTS) for i, n in enumerate(box.grid) if i != axis]
            limit = MAX_REFINED_POINTS // int(np.prod(side))
            fix = (f"more than {limit} points along {name} would be needed (a kink, a jump or very fine "
                   f"structure along {name}): use a smoother flow")
        else:
            grid[axis] = max(need, box.grid[axis])
            fix = (f"the flow has modes up to m = {(need - 1) // 3} along {name}, so the 2/3 rule needs at least "
                   f"{need} points along {name}: use domain.grid = {grid}, or a flow with lower wavenumbers")
        raise ParameterError("grid", list(box.grid),
                             f"a grid that can represent the flow: between the grid points along {name} the "
                             f"flow differs from what its samples describe by {mismatch:.3g} of <|u|^2> at "
                             f"t = {t:g} (tolerance {ALIAS_TOLERANCE:g}); its modes beyond the grid alias onto "
                             f"kept ones, so the run would see a different flow; {fix}")
