"""Layouts: what one process holds of a spectral problem, and every reduction over it.

A layout is the one object that knows *where the data are*. Everything that depends on which part
of the grid this process holds lives here:

* the local shapes: ``physical_shape`` (grid points held) and ``spectral_shape`` (Fourier modes held);
* the local coordinates (``coordinates``: broadcastable ``x, y, z``) on which flows are sampled;
* the local mode numbers and wavenumbers (``mode_numbers``, ``wavenumbers``: broadcastable, axis
  order ``(x, y, z)``), ``k_squared``, the 2/3-rule ``dealias_mask`` and its packing ``band`` (a
  :class:`~kindyn.stepping.integrating_factor.BlockSupport`), the Parseval weights;
* where the uniform mode and the planar-mean modes are (``uniform_mode``: a local index tuple or
  ``None`` when this process does not hold ``k = 0``; ``mean_mode_mask(axis)``);
* the transforms (``engine(components)``: buffers ``real``/``spectral`` of ``(components, *local)``
  and ``forward``/``backward``), and the spectral sampling of flows given by Fourier modes or by
  coefficients (:meth:`velocity_components`);
* every reduction: ``total(x)`` (sum over processes of a local number or array), ``maximum(x)``,
  ``mean_square(v_hat)`` (volume average by Parseval), ``energy``; a distributed layout does them
  with an allreduce, a serial one returns its argument.

Nothing outside a layout indexes global wavenumber arrays or assumes ``k = 0`` sits at
``[0, 0, 0]``. Layouts:

* :class:`~kindyn.layout.box_layout.BoxLayout`: the 3-D triply periodic box, serial (the whole
  real-to-complex half grid in one process);
* :class:`~kindyn.layout.kz_plane.KzPlaneLayout`: the single-k_z reduction of a z-independent flow at
  one vertical wavenumber ``k_z`` (``B = b(x, y) exp(i k_z z)``, complex ``b``), held as a 3-D
  layout with one ``z`` plane so that the same induction operator and array kernels serve it.

Test problems (fluctuation equations about a mean test field) use the box layout with the mean
modes of their average projected out (:meth:`mean_mode_mask`).
"""

from __future__ import annotations

from kindyn.layout.box_layout import BoxLayout
from kindyn.layout.kz_plane import KzPlane, KzPlaneLayout

__all__ = ["BoxLayout", "KzPlane", "KzPlaneLayout"]
