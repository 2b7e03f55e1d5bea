"""Velocity fields held as Fourier coefficients on the box's half grid: the one place where a flow
uses an FFT (numpy.fft, on the whole grid, while the flow is built from data).

Shared by the flows that are data rather than formulas (random helical ensembles, velocity files,
user flows projected onto solenoidal fields).

Conventions (as :mod:`kindyn.box`)
----------------------------------
* Coefficient arrays ``u_hat`` have shape ``(3, nx, ny, nz//2 + 1)`` (real-to-complex half grid),
  normalised so that ``u(x) = sum_k u_hat(k) exp(i k.x)``: ``numpy.fft.rfftn(..., norm="forward")``.
* On the full grid (the coordinates of ``box.coordinates``) the field is one inverse FFT; at any
  other broadcastable coordinates it is summed mode by mode, separably when each coordinate array
  varies along its own axis only (``x (nx',1,1)``, ``y (1,ny',1)``, ``z (1,1,nz')``), otherwise in
  chunks of points. Modes on even-grid Nyquist planes are ambiguous off the grid; every field built
  here is confined to the 2/3-rule band, which excludes them.
* :func:`resample_hat` changes the grid spectrally (zero padding or truncation per axis), which is
  exact for band-limited fields; an even source grid's Nyquist coefficient is split evenly between
  ``+n/2`` and ``-n/2`` when padding.
"""

from __future__ import annotations

import numpy as np

POINT_CHUNK = 4096


def hat_from_grid(u: np.ndarray) -> np.ndarray:
    """Coefficients ``(3, nx, ny, nz//2+1)`` of a physical field ``(3, nx, ny, nz)``."""
    return np.fft.rfftn(u, axes=(1, 2, 3), norm="forward")


def grid_from_hat(u_hat: np.ndarray, grid) -> np.ndarray:
    """Physical field ``(3, nx, ny, nz)`` of half-grid coefficients."""
    return np.fft.irfftn(u_hat, s=tuple(grid), axes=(1, 2, 3), norm="forward")


def is_box_grid(box, x, y, z) -> bool:
    """True when ``x, y, z`` are (equal to) the box's broadcastable grid coordinates."""
    for given, own in zip((x, y, z), box.coordinates):
        given = np.asarray(given)
        if given.shape != own.shape or not np.array_equal(given, own):
            return False
    return True


def _parseval_z_weights(box) -> np.ndarray:
    return np.asarray(box.parseval_weights[0, 0, :])


def values_at(u_hat: np.ndarray, box, x, y, z) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The field at broadcastable coordinates (full grid: one FFT; otherwise a mode sum)."""
    if is_box_grid(box, x, y, z):
        u = grid_from_hat(u_hat, box.grid)
        return u[0], u[1], u[2]
    x, y, z = (np.asarray(c, dtype=float) for c in (x, y, z))
    if _separable(x, y, z):
        return _separable_sum(u_hat, box, x, y, z)
    return _pointwise_sum(u_hat, box, x, y, z)


def _separable(x, y, z) -> bool:
    for axis, c in enumerate((x, y, z)):
        if c.ndim != 3 or any(n != 1 for i, n in enumerate(c.shape) if i != axis):
            return False
    return True


def _separable_sum(u_hat, box, x, y, z):
    """``u(x,y,z) = sum_mx e^{i kx x} sum_my e^{i ky y} sum_mz w_z Re-part ...`` by three contractions."""
    kx, ky, kz = (np.ravel(k) for k in box.wavenumbers)
    ex = np.exp(1j * np.outer(x.ravel(), kx))                    # (Px, nx)
    ey = np.exp(1j * np.outer(y.ravel(), ky))                    # (Py, ny)
    ez = np.exp(1j * np.outer(z.ravel(), kz)) * _parseval_z_weights(box)  # (Pz, nz//2+1)
    out = []
    for c in u_hat:
        v = np.einsum("ia,abc->ibc", ex, c)
        v = np.einsum("jb,ibc->ijc", ey, v)
        v = np.einsum("kc,ijc->ijk", ez, v)
        out.append(v.real)
    return tuple(out)


def _pointwise_sum(u_hat, box, x, y, z):
    shape = np.broadcast_shapes(x.shape, y.shape, z.shape)
    points = np.stack([np.broadcast_to(c, shape).ravel() for c in (x, y, z)], axis=1)
    w = np.broadcast_to(box.parseval_weights, box.spectral_shape)
    nonzero = np.flatnonzero(np.any(u_hat != 0, axis=0).ravel())
    k = np.stack([np.broadcast_to(kc, box.spectral_shape).ravel()[nonzero] for kc in box.wavenumbers], axis=1)
    coefficients = u_hat.reshape(3, -1)[:, nonzero] * w.ravel()[nonzero]
    result = np.empty((3, points.shape[0]))
    for start in range(0, points.shape[0], POINT_CHUNK):
        phase = np.exp(1j * points[start:start + POINT_CHUNK] @ k.T)   # (P, M)
        result[:, start:start + POINT_CHUNK] = (phase @ coefficients.T).real.T
    return tuple(r.reshape(shape) for r in result)


def band_mask(box) -> np.ndarray:
    """The 2/3-rule mask on the half grid (float, 1 where kept)."""
    return np.broadcast_to(box.dealias_mask, box.spectral_shape).astype(float)


def resample_hat(u_hat: np.ndarray, source_grid, target_grid) -> np.ndarray:
    """Coefficients on ``target_grid`` from coefficients on ``source_grid`` (spectral pad/truncate)."""
    full = _full_from_half(u_hat, source_grid)
    for axis in range(3):
        full = _resample_axis(full, axis + 1, source_grid[axis], target_grid[axis])
    nz = target_grid[2]
    return full[..., : nz // 2 + 1]


def _full_from_half(u_hat, grid) -> np.ndarray:
    """Full complex coefficient array ``(3, nx, ny, nz)`` from the half grid (Hermitian symmetry)."""
    return np.fft.fftn(grid_from_hat(u_hat, grid), axes=(1, 2, 3), norm="forward")


def _resample_axis(c: np.ndarray, axis: int, n: int, m: int) -> np.ndarray:
    """Pad or truncate FFT-ordered coefficients along ``axis`` from ``n`` to ``m`` entries."""
    if n == m:
        return c
    shape = list(c.shape)
    shape[axis] = m
    out = np.zeros(shape, dtype=complex)
    keep = (min(n, m) - 1) // 2   # modes |j| <= keep are copied unchanged

    def index(j, size):
        sl = [slice(None)] * c.ndim
        sl[axis] = j % size
        return tuple(sl)

    for j in range(-keep, keep + 1):
        out[index(j, m)] = c[index(j, n)]
    if m > n and n % 2 == 0:          # split the source Nyquist coefficient between +-n/2
        half = c[index(n // 2, n)] / 2
        out[index(n // 2, m)] += half
        out[index(-n // 2, m)] += half
    # m < n: the target Nyquist (m even) is left at zero; it lies outside the 2/3-rule band.
    return out
