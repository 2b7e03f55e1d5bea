"""Floquet modes of time-periodic flows: eigenvalues of the period map.

For ``u(x, t + T) = u(x, t)`` the solutions of the linear induction equation are Floquet modes
``B(x, t) = exp(p t) P(x, t)`` with ``P`` T-periodic. The period map ``A: B(0) -> B(T)`` is a
:class:`~kindyn.eigen.propagator.Propagator` started at ``t = 0`` with a whole number of steps per
period (``dt = T/steps``, stage times ``t_n + c_i dt`` as in every run); its eigenvalues are the
Floquet multipliers ``mu = exp(p T)``, so

    gamma = ln|mu| / T,        omega = arg(mu) / T   (modulo 2 pi / T)

The frequency of a Floquet mode is only defined modulo the flow's angular frequency ``2 pi/T``
(``P`` absorbs any whole number of flow periods); it is reported in ``(-pi/T, pi/T]``, and the
modulus is stored with every result.
"""

from __future__ import annotations

import math

from kindyn.eigen.krylov import EigenSolution, leading_eigenpairs
from kindyn.eigen.propagator import Propagator, box_propagator, kz_plane_propagator
from kindyn.layout import KzPlane


def steps_per_period(period: float, dt_max: float, multiple: int = 1) -> int:
    """The smallest whole number of steps (a multiple of ``multiple``) with ``dt = period/steps <= dt_max``."""
    if not (period > 0 and dt_max > 0 and math.isfinite(period)):
        raise ValueError(f"need a positive period and step, got period={period}, dt_max={dt_max}")
    steps = max(1, math.ceil(period / dt_max - 1e-12))
    return multiple * math.ceil(steps / multiple)


def box_period_map(box, flow, eta: float, dt_max: float, transforms=None, scheme: str = "rk4") -> Propagator:
    """The 3-D period map of ``flow`` (period ``flow.period``) with steps no longer than ``dt_max``."""
    steps = steps_per_period(flow.period, dt_max)
    return box_propagator(box, flow, eta, flow.period / steps, steps, transforms, scheme, start_time=0.0)


def kz_plane_period_map(grid: KzPlane, flow, eta: float, dt_max: float, scheme: str = "rk4",
                      transforms=None) -> Propagator:
    """The planar period map at ``grid.kz`` (z-independent time-periodic flows)."""
    steps = steps_per_period(flow.period, dt_max)
    return kz_plane_propagator(grid, flow, eta, flow.period / steps, steps, scheme, start_time=0.0,
                             transforms=transforms)


def floquet_modes(period_map: Propagator, count: int, **arpack) -> EigenSolution:
    """Leading Floquet multipliers and modes of ``period_map`` (see :func:`leading_eigenpairs`).

    The returned eigenvalues are Floquet exponents ``p = ln(mu)/T`` with ``Im p`` in
    ``(-pi/T, pi/T]`` (frequency modulo ``2 pi/T``; ``EigenSolution.frequency_modulus``).
    """
    return leading_eigenpairs(period_map, count, periodic=True, **arpack)
