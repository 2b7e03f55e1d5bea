"""Choice of the time step and of the sampling interval.

Advective CFL condition for the pseudo-spectral RK step::

    dt = cfl / sum_i ( max|u_i| k_max,i )

with ``k_max,i`` the largest wavenumber kept by the 2/3 rule on axis ``i`` (classical RK4 is stable
for ``|lambda dt| <~ 2.8`` on the imaginary axis, so ``cfl = 1`` leaves a margin; diffusion is exact
and sets no limit for rk3 and rk4). The explicit midpoint rule (rk2) has no stable segment of the
imaginary axis: its limit depends on the step diffusion number ``delta = eta/(dt U^2)`` with
``U = max_x |u|`` (:attr:`Timing.damping`; derivation in :mod:`kindyn.stepping.tableaux`).

For a time-periodic flow (period ``T``) or a renovating flow (renewal time
``tau``) the step is shrunk so that a whole number of steps fits in ``T`` (or ``tau``), and the
energy is sampled at fractions of it, so that growth is measured over whole periods. An automatic
step never exceeds the sample interval, nor ``tau_c/8`` for a flow that changes continuously with a
correlation time ``tau_c`` (Ornstein–Uhlenbeck amplitudes).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


SAMPLES_PER_PERIOD = 8
STEPS_PER_CORRELATION_TIME = 8  # automatic steps of a flow with a correlation time but no period


@dataclass(frozen=True)
class Timing:
    dt: float
    steps_per_sample: int
    samples_per_strobe: int  # samples between two points used by the growth estimator
    courant: float  # dt * sum_i max|u_i| k_max,i, compared with the scheme's stability limit
    damping: float | None = None  # step diffusion number eta/(dt U^2), U = max|u| (None: eta not given; inf: no flow)

    @property
    def sample_interval(self) -> float:
        return self.dt * self.steps_per_sample


def flow_time_period(flow) -> float | None:
    """The flow's period or renewal time (``None`` for a steady or aperiodic flow)."""
    return getattr(flow, "period", None) or getattr(flow, "renewal_time", None)


def _speed_times(flow, period: float | None) -> list[float]:
    return [0.0] if (flow.steady or not period) else list(np.linspace(0, period, 16, endpoint=False))


def max_speeds(flow, layout, period: float | None) -> np.ndarray:
    """``max |u_i|`` over the grid (and over a period sampled at 16 times when time-periodic), through
    the layout (:mod:`kindyn.layout`: its points and its maximum over processes)."""
    speeds = np.zeros(3)
    for t in _speed_times(flow, period):
        local = [float(np.max(np.abs(c))) for c in layout.velocity_components(flow, t, np.float64)]
        speeds = np.maximum(speeds, layout.maximum(np.array(local)))
    return speeds


def max_speed(flow, layout, period: float | None = None) -> float:
    """``U = max_x |u|`` over the grid (and over a period, as :func:`max_speeds`)."""
    if period is None:
        period = flow_time_period(flow)
    top = 0.0
    for t in _speed_times(flow, period):
        ux, uy, uz = layout.velocity_components(flow, t, np.float64)
        local = float(np.max(np.sqrt(np.asarray(ux) ** 2 + np.asarray(uy) ** 2 + np.asarray(uz) ** 2)))
        top = max(top, float(layout.maximum(np.array([local]))[0]))
    return top


def diffusion_number(eta: float, dt: float, speed: float) -> float:
    """The step diffusion number ``delta = eta/(dt U^2)`` (``inf`` without a flow)."""
    if not speed > 0 or not dt > 0:
        return math.inf
    return float(eta) / (dt * speed * speed)


def advection_rate(flow, layout) -> float:
    """``sum_i max|u_i| k_max,i``: the bound on ``|lambda|`` of the advective part (``dt = cfl / rate``)."""
    return float(np.dot(max_speeds(flow, layout, flow_time_period(flow)), layout.max_kept_wavenumbers))


def cfl_time_step(flow, layout, cfl: float) -> float:
    rate = advection_rate(flow, layout)
    return cfl / rate if rate > 0 else math.inf


def choose_timing(flow, layout, cfl: float, time_step: float | None, sample_interval: float | None,
                  eta: float | None = None) -> Timing:
    """Time step and sampling for a run (see module docstring); with ``eta`` the timing also carries
    the step diffusion number (:attr:`Timing.damping`) that the rk2 stability limit needs."""
    period = flow_time_period(flow)
    rate = advection_rate(flow, layout)
    speed = max_speed(flow, layout, period) if eta is not None else 0.0
    dt = time_step if time_step else (cfl / rate if rate > 0 else math.inf)
    turnover = 1.0 / (flow.speed * flow.wavenumber)
    if period:
        steps_per_period = max(SAMPLES_PER_PERIOD, math.ceil(period / dt))
        steps_per_period = SAMPLES_PER_PERIOD * math.ceil(steps_per_period / SAMPLES_PER_PERIOD)
        dt = period / steps_per_period
        return Timing(dt, steps_per_period // SAMPLES_PER_PERIOD, SAMPLES_PER_PERIOD, dt * rate,
                      diffusion_number(eta, dt, speed) if eta is not None else None)
    if not math.isfinite(dt):
        dt = 0.1 * turnover
    interval = sample_interval if sample_interval else 0.25 * turnover
    if not time_step:  # a step never spans more than one sample (a slow flow's CFL step can be huge)
        dt = min(dt, interval)
        correlation = getattr(flow, "correlation_time", None)
        if correlation and not flow.steady:  # a continuously changing flow (Ornstein-Uhlenbeck) is resolved in time
            dt = min(dt, correlation / STEPS_PER_CORRELATION_TIME)
    return Timing(dt, max(1, round(interval / dt)), 1, dt * rate,
                  diffusion_number(eta, dt, speed) if eta is not None else None)
