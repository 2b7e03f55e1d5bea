"""Vector calculus on spectral arrays (axis order ``(component, x, y, z)``).

All functions take a layout (:mod:`kindyn.layout`; anything with local broadcastable
``wavenumbers`` and ``k_squared``) and write into ``out`` when it is given or return a new array.
Derivatives are exact for the represented modes: ``d/dx_j -> i k_j``.
"""

from __future__ import annotations

import numpy as np


def curl_hat(v_hat: np.ndarray, layout, out: np.ndarray | None = None) -> np.ndarray:
    """``(curl v)_hat = i k x v_hat``; ``out`` must not alias ``v_hat``."""
    kx, ky, kz = layout.wavenumbers
    if out is None:
        out = np.empty_like(v_hat)
    vx, vy, vz = v_hat
    np.multiply(ky, vz, out=out[0]); out[0] -= kz * vy
    np.multiply(kz, vx, out=out[1]); out[1] -= kx * vz
    np.multiply(kx, vy, out=out[2]); out[2] -= ky * vx
    out *= 1j
    return out


def divergence_hat(v_hat: np.ndarray, layout) -> np.ndarray:
    """``(div v)_hat = i k . v_hat`` (scalar half-grid array)."""
    kx, ky, kz = layout.wavenumbers
    return 1j * (kx * v_hat[0] + ky * v_hat[1] + kz * v_hat[2])


def solenoidal_part_hat(v_hat: np.ndarray, layout) -> np.ndarray:
    """Leray projection ``v - k (k . v)/|k|^2`` (the k = 0 mode is left unchanged)."""
    kx, ky, kz = layout.wavenumbers
    k2 = np.where(layout.k_squared == 0, 1.0, layout.k_squared)
    k_dot_v = (kx * v_hat[0] + ky * v_hat[1] + kz * v_hat[2]) / k2
    return np.stack([v_hat[0] - kx * k_dot_v, v_hat[1] - ky * k_dot_v, v_hat[2] - kz * k_dot_v])



def cross(a: np.ndarray, b: np.ndarray, out: np.ndarray, scratch: np.ndarray | None = None) -> np.ndarray:
    """Pointwise ``a x b`` of physical ``(3, ...)`` arrays into ``out`` (must alias neither).

    ``scratch`` (shape of one component) avoids a temporary per component in hot loops.
    """
    if scratch is None:
        scratch = np.empty(out.shape[1:], dtype=out.dtype)
    for i, j, k in ((0, 1, 2), (1, 2, 0), (2, 0, 1)):
        np.multiply(a[j], b[k], out=out[i])
        np.multiply(a[k], b[j], out=scratch)
        out[i] -= scratch
    return out
