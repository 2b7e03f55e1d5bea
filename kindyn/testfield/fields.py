"""Test fields and the averages they are measured with.

Test fields (mean fields ``B_T`` prescribed in the test problems):

* **uniform** ``B_T = e_j`` (``j = x, y, z``) with the **box average**; they give the full
  ``alpha_ij`` of ``Ebar_i = alpha_ij Bbar_j`` (``Ebar`` for ``B_T = e_j`` is column ``j``).
* **sinusoidal** along the averaging axis ``s`` (one of x, y, z), for each perpendicular
  component ``j`` (in x, y, z order) and wavenumber ``K = 2 pi m / L_s``::

      B_T = e_j cos(K s)     ("cos")          B_T = e_j sin(K s)     ("sin")

  with **planar averages** over the two other coordinates. They are solenoidal and satisfy
  ``curl B_T = grad(c) x e_j = c'(s) e_s x e_j`` with ``c = cos`` or ``sin``.

Averages (axis order ``(component, x, y, z)``), through the layout that holds the field
(:mod:`kindyn.layout`): the box average of ``f`` is its ``k = 0`` coefficient; the planar average
``<f>(s)`` keeps exactly the modes whose mode numbers vanish on the two perpendicular axes
(:func:`mean_mode_mask`), and ``f' = f - <f>`` removes them. Mean profiles along ``s`` are
returned on the grid points of ``s``, summed from the (dealiased) mean modes with their Parseval
weights and reduced over processes, so that nothing here depends on where a mode is held.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

AXIS_NAMES = ("x", "y", "z")


@dataclass(frozen=True)
class TestField:
    """One test field: component ``j``, ``kind`` ("uniform", "cos" or "sin"), axis ``s`` and mode ``m``."""

    component: int
    kind: str = "uniform"
    axis: int = 2
    mode: int = 0
    wavenumber: float = 0.0

    __test__ = False  # not a pytest class

    @property
    def label(self) -> str:
        j = AXIS_NAMES[self.component]
        if self.kind == "uniform":
            return f"B=e_{j}"
        return f"B=e_{j} {self.kind}({self.wavenumber:.6g} {AXIS_NAMES[self.axis]})"

    def profile(self, s: np.ndarray) -> np.ndarray:
        """``c(s)``: 1, ``cos(K s)`` or ``sin(K s)`` at the coordinates ``s``."""
        s = np.asarray(s, float)
        if self.kind == "uniform":
            return np.ones_like(s)
        return np.cos(self.wavenumber * s) if self.kind == "cos" else np.sin(self.wavenumber * s)

    def derivative(self, s: np.ndarray) -> np.ndarray:
        """``c'(s)``."""
        s = np.asarray(s, float)
        K = self.wavenumber
        if self.kind == "uniform":
            return np.zeros_like(s)
        return -K * np.sin(K * s) if self.kind == "cos" else K * np.cos(K * s)

    def mean_field(self, s: np.ndarray) -> np.ndarray:
        """``Bbar(s)``, shape ``(3, len(s))``."""
        out = np.zeros((3, np.size(s)))
        out[self.component] = self.profile(s)
        return out

    def mean_current(self, s: np.ndarray) -> np.ndarray:
        """``curl Bbar(s) = c'(s) e_s x e_j``, shape ``(3, len(s))``."""
        e_s, e_j = np.eye(3)[self.axis], np.eye(3)[self.component]
        return np.cross(e_s, e_j)[:, None] * self.derivative(s)[None, :]

    def physical(self, layout) -> np.ndarray:
        """``B_T`` on the layout's local points, shape ``(3, ...)`` broadcasting to the local grid (only
        the averaging axis has its full local length)."""
        s = np.asarray(layout.coordinates[self.axis])
        out = np.zeros((3, *s.shape))
        out[self.component] = self.profile(s)
        return out


def uniform_test_fields() -> tuple[TestField, ...]:
    """``e_x, e_y, e_z``."""
    return tuple(TestField(j) for j in range(3))


def sinusoidal_test_fields(axis: int, mode: int, wavenumber: float) -> tuple[TestField, ...]:
    """``(e_p cos, e_p sin, e_q cos, e_q sin)`` with ``p < q`` the axes perpendicular to ``axis``."""
    perpendicular = [j for j in range(3) if j != axis]
    return tuple(TestField(j, kind, axis, mode, wavenumber) for j in perpendicular for kind in ("cos", "sin"))


def mean_mode_mask(layout, axis: int | None) -> np.ndarray:
    """Local boolean mask of the modes that make up the average.

    ``axis=None``: box average (only ``k = 0``). Otherwise the planar average whose result depends
    on coordinate ``axis``: modes with zero mode numbers on the two other axes.
    """
    return layout.mean_mode_mask(axis)


def mean_profile(f_hat: np.ndarray, layout, axis: int | None) -> np.ndarray:
    """Average of the real field with local coefficients ``f_hat`` (shape ``(..., *spectral_shape)``).

    Box average (``axis=None``): shape ``(...)``. Planar average: shape ``(..., n_axis)``, the
    values of the dealiased mean at the grid points of ``axis``:
    ``<f>(s_j) = sum_m w_m Re(f_hat_m exp(i k_m s_j))`` over the local mean modes, reduced over processes.
    """
    mask = np.broadcast_to(layout.mean_mode_mask(axis) & layout.dealias_mask, layout.spectral_shape)
    flat = np.flatnonzero(mask)
    lead = f_hat.shape[:-3]
    values = f_hat.reshape(*lead, -1)[..., flat] * np.broadcast_to(layout.parseval_weights,
                                                                    layout.spectral_shape).ravel()[flat]
    if axis is None:
        return np.asarray(layout.total(values.real.sum(axis=-1)))
    k = np.broadcast_to(layout.wavenumbers[axis], layout.spectral_shape).ravel()[flat]
    n, L = layout.grid[axis], layout.lengths[axis]
    s = np.arange(n) * (L / n)
    phases = np.exp(1j * np.outer(k, s))  # (modes, n)
    return np.asarray(layout.total((values @ phases).real))
