"""Checks of user-defined flows before a run: shapes, finite values, periodicity, band, divergence.

Every check raises :class:`~kindyn.errors.ParameterError` whose ``expected`` text carries the
measured number, so the case loader reports ``FILE: flow.KEY = VALUE: expected ...`` in one line.

Measures (volume averages, Fourier coefficients on the box's half grid, ``u = sum u_hat e^{ik.x}``):

* relative divergence ``||div u||_2 / ||grad u||_2 = sqrt(sum w |k . u_hat|^2 / sum w |k|^2 |u_hat|^2)``
  (0 for a solenoidal field, 1 for a pure gradient; independent of the field's amplitude and scale);
* band fraction: the share of ``<|u|^2>`` in modes the 2/3 rule removes; products of such modes
  with the field alias onto kept modes, so the flow must fit the band as the built-in flows do;
* periodicity (formula and callable flows only, which can be evaluated anywhere): ``u`` on the
  faces ``x_i = L_i`` against ``x_i = 0`` (and both shifted by 0.37 grid cells inward), relative to
  ``max |u|`` on the grid and the faces;
* real values: complex components are refused, never cast;
* the uniform part: ``|<u>|^2/<|u|^2>`` above :data:`MEAN_FLOW_TOLERANCE` needs ``mean_flow = "allow"``;
* time: a declared period must hold, ``max|u(t0 + P) - u(t0)| <= PERIOD_TOLERANCE max|u|`` at
  ``t0 = 0.37 P``; a time-dependent formula or callable must declare ``period = P`` or ``"none"``.

Aliasing (the grid's samples are another flow) is checked in :mod:`kindyn.flows.aliasing`.
"""

from __future__ import annotations

import numpy as np

from kindyn.calculus import solenoidal_part_hat
from kindyn.errors import MISSING, ParameterError
from kindyn.flows.aliasing import highest_mode
from kindyn.flows.gridded import band_mask, hat_from_grid
from kindyn.limits import MAX_MAGNITUDE

DIVERGENCE_TOLERANCE = 1e-6
BAND_TOLERANCE = 1e-6
PERIODICITY_TOLERANCE = 1e-9
DIVERGENCE_CHOICES = ("reject", "project")


def relative_divergence(u_hat: np.ndarray, box) -> float:
    """``||div u|| / ||grad u||`` from half-grid coefficients (0 for a uniform field)."""
    kx, ky, kz = box.wavenumbers
    w = box.parseval_weights
    div = kx * u_hat[0] + ky * u_hat[1] + kz * u_hat[2]
    num = float(np.sum(w * np.abs(div) ** 2))
    den = float(np.sum(w * box.k_squared * sum(np.abs(c) ** 2 for c in u_hat)))
    return float(np.sqrt(num / den)) if den > 0 else 0.0


def band_fraction(u_hat: np.ndarray, box) -> float:
    """Share of ``<|u|^2>`` in the modes removed by the 2/3 rule."""
    w = box.parseval_weights
    density = w * sum(np.abs(c) ** 2 for c in u_hat)
    total = float(np.sum(density))
    return float(np.sum(density * (1.0 - band_mask(box)))) / total if total > 0 else 0.0


def project_solenoidal(u_hat: np.ndarray, box) -> np.ndarray:
    """The solenoidal part of ``u`` (Leray projection; the uniform k = 0 part is kept)."""
    return solenoidal_part_hat(u_hat, box)


def grid_values(components, box, key: str, value, t: float) -> np.ndarray:
    """Broadcast three returned components to ``(3, nx, ny, nz)``; raise on a wrong shape or type."""
    try:
        parts = list(components)
    except TypeError:
        raise ParameterError(key, value, f"three velocity components (ux, uy, uz); got {type(components).__name__}") from None
    if len(parts) != 3:
        raise ParameterError(key, value, f"three velocity components (ux, uy, uz); got {len(parts)}")
    out = np.empty((3, *box.shape))
    for i, (axis, part) in enumerate(zip("xyz", parts)):
        try:
            array = np.asarray(part)
            if np.iscomplexobj(array):
                imag = float(np.max(np.abs(array.imag))) if array.size else 0.0
                raise ParameterError(key, value, f"real numbers for u_{axis}; got complex values (max |Im u_{axis}| "
                                     f"= {imag:.3g} at t = {t:g}); return the real part yourself if that is the flow")
            array = np.asarray(array, dtype=float)
        except (TypeError, ValueError):
            raise ParameterError(key, value, f"real numbers for u_{axis}; got {type(part).__name__}") from None
        try:
            out[i] = np.broadcast_to(array, box.shape)
        except ValueError:
            raise ParameterError(key, value, f"u_{axis} of a shape broadcastable to the grid {tuple(box.shape)} "
                                 f"at t = {t:g}; got shape {array.shape}") from None
    return out


def check_finite(u: np.ndarray, box, key: str, value, t: float) -> None:
    """Every value finite, and the largest ``|u_i|`` at most :data:`kindyn.limits.MAX_MAGNITUDE`
    (beyond it the flow's energy and the products with the field overflow)."""
    bad = ~np.isfinite(u)
    if bad.any():
        component, i, j, k = np.argwhere(bad)[0]
        x, y, z = (box.axis(a)[n] for a, n in enumerate((i, j, k)))
        raise ParameterError(key, value, f"finite velocities: {int(bad.sum())} of {u.size} values are NaN or "
                             f"infinite at t = {t:g} (first: u_{'xyz'[component]} at x = {x:.4g}, "
                             f"y = {y:.4g}, z = {z:.4g})")
    largest = float(np.max(np.abs(u))) if u.size else 0.0
    if largest > MAX_MAGNITUDE:
        raise ParameterError(key, value, f"velocities of magnitude at most {MAX_MAGNITUDE:g} (the largest "
                             f"|u_i| at t = {t:g} is {largest:.3g}: its energy and products overflow)")


def check_periodic(velocity, box, key: str, value, t: float, scale: float) -> None:
    """Compare ``u`` on the far faces with the near faces of the box (see module docstring); the
    scale is the largest ``|u|`` on the grid or on the faces (a grid may miss an aliased flow)."""
    coords = box.coordinates
    pairs = []
    for axis, name in enumerate("xyz"):
        L, h = box.lengths[axis], box.spacing[axis]
        for offset in (0.0, 0.37 * h):
            near, far = list(coords), list(coords)
            shape = [1, 1, 1]
            near[axis] = np.full(shape, offset)
            far[axis] = np.full(shape, L + offset)
            a = grid_values(velocity(*near, t), _face(box, axis), key, value, t)
            b = grid_values(velocity(*far, t), _face(box, axis), key, value, t)
            scale = max(scale, float(np.max(np.abs(a))))
            pairs.append((name, offset, float(np.max(np.abs(a - b)))))
    for name, offset, gap in pairs:
        if not gap <= PERIODICITY_TOLERANCE * max(scale, 1e-300):
            raise ParameterError(key, value, f"a flow periodic in the box: along {name}, u at {name} = "
                                 f"L{name} + {offset:.3g} differs from u at {name} = {offset:.3g} by up to "
                                 f"{gap:.3g} ({gap / scale if scale else float('inf'):.3g} of max|u|; "
                                 f"tolerance {PERIODICITY_TOLERANCE:g}) at t = {t:g}")


class _Face:
    """A stand-in box whose grid is one layer thick along ``axis`` (for :func:`grid_values`)."""

    def __init__(self, shape):
        self.shape = tuple(shape)


def _face(box, axis):
    shape = list(box.shape)
    shape[axis] = 1
    return _Face(shape)


def check_band(u_hat: np.ndarray, box, key: str, value, t: float, fraction: float | None = None) -> None:
    """Raise when more than :data:`BAND_TOLERANCE` of ``<|u|^2>`` lies outside the kept band
    (``fraction`` overrides the share measured from ``u_hat``, e.g. after resampling)."""
    measured = fraction is None
    fraction = band_fraction(u_hat, box) if measured else fraction
    if fraction > BAND_TOLERANCE:
        fix = "use a finer grid or a smoother flow"
        if measured:   # the sample holds the flow's modes (no aliasing): the 2/3 rule needs 3 m + 1 points
            need = [max(n, 3 * highest_mode(u_hat, box, axis, BAND_TOLERANCE) + 1) for axis, n in enumerate(box.grid)]
            fix = f"use a finer grid (at least domain.grid = {need}) or a smoother flow"
        raise ParameterError("grid", list(box.grid),
                             f"a grid that holds the flow: {fraction:.3g} of <|u|^2> at t = {t:g} is in modes "
                             f"the 2/3 rule removes (tolerance {BAND_TOLERANCE:g}; products with those modes "
                             f"alias); {fix}")


def check_divergence(u_hat: np.ndarray, box, tolerance: float, key: str, value, t: float) -> float:
    """Return the relative divergence; raise when it exceeds ``tolerance``."""
    measured = relative_divergence(u_hat, box)
    if not measured <= tolerance:
        raise ParameterError(key, value, f"a solenoidal flow: ||div u||/||grad u|| = {measured:.3g} at t = {t:g} "
                             f"(tolerance {tolerance:g}); fix the flow, or set flow.divergence = \"project\" "
                             "to use its solenoidal part")
    return measured


def check_sampled(u: np.ndarray, box, key: str, value, t: float, divergence: str,
                  tolerance: float) -> np.ndarray:
    """Finite values, band and divergence of a grid sample ``u``; return its coefficients
    (projected onto solenoidal fields when ``divergence == "project"``)."""
    check_finite(u, box, key, value, t)
    return check_coefficients(hat_from_grid(u), box, key, value, t, divergence, tolerance)


def check_coefficients(u_hat: np.ndarray, box, key: str, value, t: float, divergence: str,
                       tolerance: float, band_share: float | None = None) -> np.ndarray:
    """Band and divergence checks of half-grid coefficients (see :func:`check_sampled`)."""
    check_band(u_hat, box, key, value, t, band_share)
    if divergence == "project":
        return project_solenoidal(u_hat, box)
    check_divergence(u_hat, box, tolerance, key, value, t)
    return u_hat


def divergence_options(params: dict) -> tuple[str, float]:
    """Read and validate the ``divergence`` and ``divergence_tolerance`` keys (removing them)."""
    choice = params.pop("divergence", "reject")
    if choice not in DIVERGENCE_CHOICES:
        raise ParameterError("divergence", choice, "one of " + ", ".join(f'"{c}"' for c in DIVERGENCE_CHOICES))
    tolerance = params.pop("divergence_tolerance", DIVERGENCE_TOLERANCE)
    if isinstance(tolerance, bool) or not isinstance(tolerance, (int, float)) or not tolerance > 0:
        raise ParameterError("divergence_tolerance", tolerance, "a positive number")
    return choice, float(tolerance)


# --- declarations a user flow must make: a mean flow, a period ----------------------------------

MEAN_FLOW_TOLERANCE = 1e-12
MEAN_FLOW_CHOICES = ("refuse", "allow")
PERIOD_TOLERANCE = 1e-6
APERIODIC = "none"


def mean_flow_option(params: dict) -> str:
    """The ``mean_flow`` key: ``"refuse"`` (default) or ``"allow"``."""
    choice = params.get("mean_flow", "refuse")
    if choice not in MEAN_FLOW_CHOICES:
        raise ParameterError("mean_flow", choice, "one of " + ", ".join(f'"{c}"' for c in MEAN_FLOW_CHOICES))
    return choice


def check_mean_flow(u_hat: np.ndarray, box, t: float, choice: str, given) -> None:
    """Refuse a uniform (k = 0) part unless ``mean_flow = "allow"``.

    A uniform flow ``U0`` alone only advects B (each Fourier mode turns at ``k.U0``; it makes no
    dynamo). Added to a flow ``u'(x)`` it is not harmless: in the frame moving with ``U0`` the flow
    is ``u'(x + U0 t)``, a time-dependent flow, so the growth rate changes; and it enters ``u_rms``,
    hence what Rm means. Share measured: ``|<u>|^2 / <|u|^2>`` against :data:`MEAN_FLOW_TOLERANCE`."""
    if choice == "allow":
        return
    mean = u_hat[:, 0, 0, 0].real
    total = float(np.sum(box.parseval_weights * sum(np.abs(c) ** 2 for c in u_hat)))
    share = float(np.sum(mean**2)) / total if total > 0 else 0.0
    if share > MEAN_FLOW_TOLERANCE:
        shown = ", ".join(f"{v:.4g}" for v in mean)
        raise ParameterError("mean_flow", MISSING if given is None else given,
                             f'mean_flow = "allow" for a flow with a uniform part: <u> = ({shown}) carries '
                             f"{share:.3g} of <|u|^2> at t = {t:g}; a uniform flow only advects B (it makes no "
                             "dynamo), it sweeps the rest of the flow past the field (changing the growth rate) and "
                             "it changes what Rm means (it enters u_rms); subtract it from the flow, "
                             'or set flow.mean_flow = "allow"')


def period_option(params: dict) -> tuple[float | None, bool]:
    """The ``period`` key: ``(period, False)``, ``(None, True)`` for ``"none"``, ``(None, False)`` if absent."""
    value = params.get("period")
    if value is None:
        return None, False
    if value == APERIODIC:
        return None, True
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not (value > 0 and np.isfinite(value)):
        raise ParameterError("period", value, f'the flow\'s period (a positive number) or "{APERIODIC}" for a '
                             "time-dependent flow that is not periodic")
    return float(value), False


def check_period(grid_at, period: float, scale: float) -> None:
    """Refuse a declared period the flow does not have: ``u(t0 + P)`` against ``u(t0)``, ``t0 = 0.37 P``,
    relative to the largest ``|u_i|`` at ``t0`` and ``t0 + P`` or ``scale`` (a flow may vanish at t = 0)."""
    t0 = 0.37 * period
    later, now = grid_at(t0 + period), grid_at(t0)
    gap = float(np.max(np.abs(later - now)))
    scale = max(scale, float(np.max(np.abs(now))), float(np.max(np.abs(later))))
    if not gap <= PERIOD_TOLERANCE * max(scale, 1e-300):
        raise ParameterError("period", period, f"the flow's period: u(t + P) differs from u(t) by up to {gap:.3g} "
                             f"({gap / scale if scale else float('inf'):.3g} of max|u|; tolerance "
                             f"{PERIOD_TOLERANCE:g}) at t = {t0:.6g}; give the period to full precision "
                             "(e.g. 6.283185307179586 for 2*pi), "
                             f'or period = "{APERIODIC}" if the flow is not periodic')


def require_time_declaration(steady: bool, period, aperiodic: bool, how: str, change: float | None) -> None:
    """A time-dependent user flow must declare its period or that it has none (Floquet sampling,
    test-field averaging and the reported frequency band depend on it)."""
    if steady or period is not None or aperiodic:
        return
    if change is None:
        seen, hint = "", ""
    elif change > 0:
        seen, hint = f"; u changes by up to {change:.3g} between t = 0 and t = 0.5, 2", ""
    else:
        seen, hint = "; it returned the same u at t = 0, 0.5 and 2", ", or steady = true if it does not depend on t"
    raise ParameterError("period", MISSING, f"the period of this time-dependent flow ({how}{seen}): "
                         f'period = P, or period = "{APERIODIC}" for a flow that is not periodic{hint}')
