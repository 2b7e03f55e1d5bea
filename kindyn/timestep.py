"""Choice of the time step and of the sampling interval.

Advective CFL condition for the pseudo-spectral RK step::

    dt = cfl / sum_i ( max|u_i| k_max,i )

with ``k_max,i`` the largest wavenumber kept by the 2/3 rule on axis ``i`` (classical RK4 is stable
for ``|lambda dt| <~ 2.8`` on the imaginary axis, so ``cfl = 1`` leaves a margin; diffusion is exact
and sets no limit). For a time-periodic flow (period ``T``) or a renovating flow (renewal time
``tau``) the step is shrunk so that a whole number of steps fits in ``T`` (or ``tau``), and the
energy is sampled at fractions of it, so that growth is measured over whole periods.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


SAMPLES_PER_PERIOD = 8


@dataclass(frozen=True)
class Timing:
    dt: float
    steps_per_sample: int
    samples_per_strobe: int  # samples between two points used by the growth estimator
    courant: float  # dt * sum_i max|u_i| k_max,i, compared with the scheme's stability limit

    @property
    def sample_interval(self) -> float:
        return self.dt * self.steps_per_sample


def flow_time_period(flow) -> float | None:
    """The flow's period or renewal time (``None`` for a steady or aperiodic flow)."""
    return getattr(flow, "period", None) or getattr(flow, "renewal_time", None)


def max_speeds(flow, layout, period: float | None) -> np.ndarray:
    """``max |u_i|`` over the grid (and over a period sampled at 16 times when time-periodic), through
    the layout (:mod:`kindyn.layout`: its points and its maximum over processes)."""
    times = [0.0] if (flow.steady or not period) else list(np.linspace(0, period, 16, endpoint=False))
    speeds = np.zeros(3)
    for t in times:
        local = [float(np.max(np.abs(c))) for c in layout.velocity_components(flow, t, np.float64)]
        speeds = np.maximum(speeds, layout.maximum(np.array(local)))
    return speeds


def advection_rate(flow, layout) -> float:
    """``sum_i max|u_i| k_max,i``: the bound on ``|lambda|`` of the advective part (``dt = cfl / rate``)."""
    return float(np.dot(max_speeds(flow, layout, flow_time_period(flow)), layout.max_kept_wavenumbers))


def cfl_time_step(flow, layout, cfl: float) -> float:
    rate = advection_rate(flow, layout)
    return cfl / rate if rate > 0 else math.inf


def choose_timing(flow, layout, cfl: float, time_step: float | None, sample_interval: float | None) -> Timing:
    """Time step and sampling for a run (see module docstring)."""
    period = flow_time_period(flow)
    rate = advection_rate(flow, layout)
    dt = time_step if time_step else (cfl / rate if rate > 0 else math.inf)
    turnover = 1.0 / (flow.speed * flow.wavenumber)
    if period:
        steps_per_period = max(SAMPLES_PER_PERIOD, math.ceil(period / dt))
        steps_per_period = SAMPLES_PER_PERIOD * math.ceil(steps_per_period / SAMPLES_PER_PERIOD)
        dt = period / steps_per_period
        return Timing(dt, steps_per_period // SAMPLES_PER_PERIOD, SAMPLES_PER_PERIOD, dt * rate)
    if not math.isfinite(dt):
        dt = 0.1 * turnover
    interval = sample_interval if sample_interval else 0.25 * turnover
    return Timing(dt, max(1, round(interval / dt)), 1, dt * rate)
