"""What every flow provides, and helpers shared by the flow modules.

A flow is a frozen dataclass of its parameters with

* ``velocity(x, y, z, t) -> (ux, uy, uz)``: physical-space velocity at broadcastable coordinate
  arrays (``x (nx,1,1)``, ``y (1,ny,1)``, ``z (1,1,nz)``) and time ``t``; components may have any
  shape that broadcasts to the grid (a z-independent flow returns ``(nx, ny, 1)`` arrays);
* ``speed`` (U) and ``wavenumber`` (k_f): the characteristic scales in ``Rm = U/(eta k_f)``, and
  ``scale_rule``: a short text saying how they were obtained (the Rm rule, :mod:`kindyn.flows.scales`;
  built-in classes state their declaration, user flows say "declared in the case", "... in the
  velocity file" or "measured"; read it with :func:`kindyn.flows.scales.scale_rule`);
* ``period``: the period of a time-periodic flow, ``None`` otherwise;
* ``steady``: True when ``u`` does not depend on ``t``;
* ``z_independent``: True when ``u`` does not depend on ``z``;
* ``check_box(box)``: raise :class:`~kindyn.errors.ParameterError` when the flow is not periodic
  in the box or needs modes the grid does not keep after dealiasing.

Optionally, a flow that is defined by Fourier data offers one of

* ``fourier_modes(t) -> (modes (M, 3) ints, coefficients (M, 3) complex)`` with
  ``u = sum_r 2 Re(c_r exp(i k_r.x))`` (random helical ensembles), or
* ``fourier_coefficients(t) -> (3, nx, ny, nz//2+1)`` half-grid coefficients on the case's grid, or
  ``None`` (velocity files, projected user flows),

and a layout (:mod:`kindyn.layout`) then synthesises the velocity on the points it holds with its
own transform. Flows never import transforms or stepping: they are formulas (or data).
"""

from __future__ import annotations

import math

import numpy as np

from kindyn.errors import ParameterError
from kindyn.limits import MAGNITUDE, in_range


def whole_mode_number(k: float, length: float, key: str, axis: str) -> int:
    """Mode number ``m = k L / (2 pi)``; raise unless it is a whole number (periodicity)."""
    m = k * length / (2 * math.pi)
    if abs(m - round(m)) > 1e-9 * max(1.0, abs(m)) or round(m) == 0:
        raise ParameterError(key, k, f"a wavenumber that fits the box along {axis}: a non-zero whole "
                                     f"multiple of 2*pi/L{axis} = {2 * math.pi / length:.6g}")
    return abs(int(round(m)))


def require_kept(box, modes: tuple[int, int, int], flow_name: str) -> None:
    """Raise when the flow's mode numbers exceed those kept by the 2/3 rule on ``box``."""
    kept = box.max_kept_modes
    for axis, m, mk, n in zip("xyz", modes, kept, box.grid):
        if m > mk:
            raise ParameterError("grid", list(box.grid),
                                 f"at least {3 * m + 1} points along {axis} for the {flow_name} flow "
                                 f"(its mode number {m} must be below n/3 after dealiasing; {n} keeps {mk})")


def positive(key: str, value: float) -> float:
    """``value`` as a float: a positive number in the case range (:mod:`kindyn.limits`)."""
    if isinstance(value, bool) or not (isinstance(value, (int, float)) and value > 0 and in_range(float(value))):
        raise ParameterError(key, value, f"a positive number {MAGNITUDE}")
    return float(value)


def finite(key: str, value: float) -> float:
    """``value`` as a float: 0 or a number in the case range (:mod:`kindyn.limits`)."""
    if isinstance(value, bool) or not (isinstance(value, (int, float)) and in_range(float(value))):
        raise ParameterError(key, value, f"a number of magnitude {MAGNITUDE} (or 0)")
    return float(value)


def sample_velocity(flow, box, t: float, out: np.ndarray | None = None) -> np.ndarray:
    """The flow on the full grid of ``box`` at time ``t``: array ``(3, nx, ny, nz)``."""
    x, y, z = box.coordinates
    if out is None:
        out = np.empty((3, *box.shape))
    for i, component in enumerate(flow.velocity(x, y, z, t)):
        out[i] = component
    return out
