"""Vector parametrisations of the dealiased, solenoidal, zero-mean magnetic fields.

The Krylov solver works on plain 1-D vectors; these classes map them to spectral fields and back.
Both use, at every kept wavevector ``q``, two real orthonormal polarisation vectors transverse to
``q`` (so the field is solenoidal by construction)::

    e1 = (-q_y, q_x, 0) / |q_h|,   e2 = q x e1 / |q|      (|q_h| > 0)
    e1 = x_hat,                    e2 = y_hat             (q = (0, 0, q_z), q_z != 0)

and ``b_hat(q) = c1 e1 + c2 e2``. The uniform mode ``q = 0`` (the neutral mean field of the
periodic problem) is left out, as are the modes removed by the 2/3 rule.

* :class:`SolenoidalBasis` (3-D box, real-to-complex half grid): the field is real, so the
  coefficients on the ``k_z = 0`` plane obey ``b_hat(-k) = conj(b_hat(k))``. The independent
  modes are those with ``m_z > 0`` plus the half of the ``m_z = 0`` plane with ``m_x > 0`` or
  (``m_x = 0``, ``m_y > 0``); the other half is filled by Hermitian symmetry. The vector is
  **real**: ``[Re c1, Re c2, Im c1, Im c2]`` over the independent modes, length ``4 n_modes``.
  Every independent mode carries Parseval weight 2, so ``|v|^2 = <|B|^2>/2 = E_M`` exactly.
* :class:`KzPlaneBasis` (single-k_z reduction ``B = b(x, y) exp(i k_z z)``): ``b`` is complex with no
  symmetry, the vector is **complex** ``[c1, c2]`` over all kept ``(m_x, m_y)`` (without
  ``q = 0`` when ``k_z = 0``), and ``|v|^2 = <|b|^2>``.
"""

from __future__ import annotations

import numpy as np


def polarisation_vectors(qx: np.ndarray, qy: np.ndarray, qz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The real orthonormal transverse pair ``(e1, e2)``, each of shape ``(3, n)``, for ``q != 0``."""
    qx, qy, qz = np.broadcast_arrays(*(np.asarray(a, float).ravel() for a in (qx, qy, qz)))
    qh = np.hypot(qx, qy)
    qn = np.sqrt(qh**2 + qz**2)
    vertical = qh == 0
    safe_qh = np.where(vertical, 1.0, qh)
    e1 = np.stack([np.where(vertical, 1.0, -qy / safe_qh), np.where(vertical, 0.0, qx / safe_qh),
                   np.zeros_like(qx)])
    e2 = np.cross(np.stack([qx, qy, qz]), e1, axis=0) / qn
    e2[:, vertical] = np.array([0.0, 1.0, 0.0])[:, None]
    return e1, e2


class SolenoidalBasis:
    """Real vectors <-> real solenoidal zero-mean dealiased fields on a 3-D half grid (see module doc)."""

    def __init__(self, layout):
        self.layout = box = layout
        if layout.uniform_mode != (0, 0, 0):
            raise ValueError("the solenoidal basis needs a layout that holds the whole half grid")
        mx, my, mz = (np.broadcast_to(m, box.spectral_shape) for m in box.mode_numbers)
        kept = np.broadcast_to(box.dealias_mask, box.spectral_shape) & ((mx != 0) | (my != 0) | (mz != 0))
        upper_plane = (mz == 0) & ((mx > 0) | ((mx == 0) & (my > 0)))
        independent = kept & ((mz > 0) | upper_plane)
        self.index = np.flatnonzero(independent)
        on_plane = mz.ravel()[self.index] == 0
        self.plane = np.flatnonzero(on_plane)  # positions (within index) of kz = 0 modes
        nx, ny, nzh = box.spectral_shape
        ix, iy, _ = np.unravel_index(self.index[self.plane], box.spectral_shape)
        self.mirror = np.ravel_multi_index(((-ix) % nx, (-iy) % ny, np.zeros_like(ix)), box.spectral_shape)
        kx, ky, kz = (np.broadcast_to(k, box.spectral_shape).ravel()[self.index] for k in box.wavenumbers)
        self.e1, self.e2 = polarisation_vectors(kx, ky, kz)
        self.modes = self.index.size
        self.size = 4 * self.modes
        self.dtype = np.float64

    def field_hat_from_vector(self, v: np.ndarray, out: np.ndarray) -> np.ndarray:
        """Fill the half-grid field ``out`` (shape ``(3, nx, ny, nz//2+1)``) from the real vector ``v``."""
        n = self.modes
        c1 = v[0:n] + 1j * v[2 * n:3 * n]
        c2 = v[n:2 * n] + 1j * v[3 * n:4 * n]
        b = self.e1 * c1 + self.e2 * c2
        flat = out.reshape(3, -1)
        flat[...] = 0
        flat[:, self.index] = b
        flat[:, self.mirror] = np.conj(b[:, self.plane])
        return out

    def vector_from_field_hat(self, b_hat: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """The real vector of ``b_hat`` (its projection on the independent solenoidal modes)."""
        b = b_hat.reshape(3, -1)[:, self.index]
        c1 = np.einsum("in,in->n", self.e1, b)
        c2 = np.einsum("in,in->n", self.e2, b)
        if out is None:
            out = np.empty(self.size)
        n = self.modes
        out[0:n], out[n:2 * n], out[2 * n:3 * n], out[3 * n:4 * n] = c1.real, c2.real, c1.imag, c2.imag
        return out

    def complex_field_hat(self, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Real and imaginary fields ``(B_r_hat, B_i_hat)`` of a complex eigenvector ``v = v_r + i v_i``."""
        shape = (3, *self.layout.spectral_shape)
        return (self.field_hat_from_vector(np.ascontiguousarray(v.real), np.empty(shape, complex)),
                self.field_hat_from_vector(np.ascontiguousarray(v.imag), np.empty(shape, complex)))


class KzPlaneBasis:
    """Complex vectors <-> complex planar amplitudes ``b_hat(m_x, m_y)`` (see module doc)."""

    def __init__(self, layout):
        self.layout = layout
        kx, ky = (np.broadcast_to(k, layout.spectral_shape) for k in layout.wavenumbers[:2])
        kept = np.broadcast_to(layout.dealias_mask, layout.spectral_shape).copy()
        if layout.uniform_mode is not None:
            kept[layout.uniform_mode] = False
        self.index = np.flatnonzero(kept)
        self.e1, self.e2 = polarisation_vectors(kx.ravel()[self.index], ky.ravel()[self.index],
                                                np.full(self.index.size, layout.kz))
        self.modes = self.index.size
        self.size = 2 * self.modes
        self.dtype = np.complex128

    def field_hat_from_vector(self, v: np.ndarray, out: np.ndarray) -> np.ndarray:
        """Fill ``out`` (shape ``(3, nx, ny, 1)`` or ``(3, nx, ny)``, complex) from the complex vector ``v``."""
        n = self.modes
        flat = out.reshape(3, -1)
        flat[...] = 0
        flat[:, self.index] = self.e1 * v[:n] + self.e2 * v[n:]
        return out

    def vector_from_field_hat(self, b_hat: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        b = b_hat.reshape(3, -1)[:, self.index]
        if out is None:
            out = np.empty(self.size, complex)
        out[:self.modes] = np.einsum("in,in->n", self.e1, b)
        out[self.modes:] = np.einsum("in,in->n", self.e2, b)
        return out
