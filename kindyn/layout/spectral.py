"""What every layout computes the same way from its local wavenumbers (see :mod:`kindyn.layout`).

Kept as plain functions of a layout so that each layout class states only what differs: the local
arrays it holds and how it reduces over processes.
"""

from __future__ import annotations

import numpy as np

from kindyn.errors import FlowError
from kindyn.stepping.integrating_factor import BlockSupport


def band_support(kept_ranges, spectral_shape) -> BlockSupport:
    """The 2/3-rule band as disjoint rectangular blocks of whole lines along the last axis.

    ``kept_ranges`` are the kept index ranges of the first two axes (lists of slices) and the
    number of kept entries along the last axis (from index 0).
    """
    x_ranges, y_ranges, z_kept = kept_ranges
    return BlockSupport([(x, y, slice(0, z_kept)) for x in x_ranges for y in y_ranges], spectral_shape)


def packed_entries(band: BlockSupport, mask: np.ndarray) -> np.ndarray:
    """Positions along the packed axis of the band entries where ``mask`` (local spectral) is true."""
    flags = np.empty(band.size, dtype=bool)
    band.gather(np.broadcast_to(mask, band.trailing_shape)[None], flags[None])
    return np.flatnonzero(flags)


def velocity_components(layout, flow, t: float, dtype) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``u_x, u_y, u_z`` at ``t`` on the layout's local points, each broadcasting to ``physical_shape``.

    A flow given by Fourier modes (``fourier_modes(t)``) or by half-grid coefficients on the
    case's grid (``fourier_coefficients(t)``; see :mod:`kindyn.flows.base`) is synthesised with the
    layout's own transform; any other flow is evaluated on the layout's local
    coordinates and keeps the shapes it returns (often lower-dimensional: the ABC flow's components
    depend on two coordinates each, and broadcasting makes the cross product read less memory).
    """
    modes = getattr(flow, "fourier_modes", None)
    if modes is not None:
        return tuple(layout.physical_from_modes(*modes(t)).astype(dtype, copy=False))
    coefficients = getattr(flow, "fourier_coefficients", None)
    coefficients = coefficients(t) if coefficients is not None else None
    field = layout.physical_from_coefficients(coefficients) if coefficients is not None else None
    if field is not None:
        return tuple(field.astype(dtype, copy=False))
    shape = layout.physical_shape
    components = []
    for c in flow.velocity(*layout.coordinates, t):
        c = np.asarray(c)
        if np.iscomplexobj(c):
            raise FlowError(f"the velocity of {type(flow).__name__} has complex values")
        c = np.asarray(c, dtype=dtype)
        c = c.reshape((1,) * (3 - c.ndim) + c.shape)
        if c.ndim != 3 or any(m not in (1, n) for m, n in zip(c.shape, shape)):
            raise FlowError(f"velocity component of shape {c.shape} does not broadcast to the local grid "
                            f"{shape} (flow {type(flow).__name__})")
        components.append(c)
    return tuple(components)
