"""Renovating flows: a step that ends on a renewal integrates the old realisation only.

Reference (exact, derived): a flow that is one steady field on [0, tau) and another on [tau, 2 tau)
must give the same field at 2 tau as integrating the first steady flow for tau and then the second
for tau with the same steps, to round-off (the stepper sees each realisation only inside its own
interval). Renovating flows of this kind are the classic short-correlation model of kinematic
dynamo theory (e.g. Dittrich et al. 1984, Astron. Nachr. 305, 119; from memory).
"""

import math
from dataclasses import dataclass

import numpy as np

from kindyn.box import Box
from kindyn.initial_fields import random_field_hat
from kindyn.flows.beltrami import ABCFlow
from kindyn.run import build_solver
from kindyn.transforms import TransformSettings

TAU = 0.4
FIRST = ABCFlow(1.0, 0.7, 0.4, 1.0)
SECOND = ABCFlow(0.3, 1.1, 0.8, 1.0)


@dataclass(frozen=True)
class TwoRealisations:
    """FIRST on [0, tau), SECOND from tau on (right-continuous, like kindyn's renovating flows)."""

    renewal_time: float = TAU
    speed = 1.0
    wavenumber = 1.0
    period = None
    steady = False
    z_independent = False

    def velocity(self, x, y, z, t):
        flow = FIRST if math.floor(t / TAU + 1e-12) < 1 else SECOND
        return flow.velocity(x, y, z, t)


def _advance(flow, b_hat, t0, dt, steps, box):
    solver = build_solver(box, flow, 0.05, TransformSettings(engine="scipy"))
    t = t0
    for _ in range(steps):
        solver.stepper.step(t, b_hat, dt)
        t += dt
    return b_hat


def test_step_ending_on_a_renewal_sees_only_the_old_realisation():
    box = Box(grid=(12, 12, 12))
    solver = build_solver(box, FIRST, 0.05, TransformSettings(engine="scipy"))
    start = random_field_hat(solver.layout, seed=4, peak_wavenumber=2.0)
    steps, dt = 8, TAU / 8
    renovated = _advance(TwoRealisations(), start.copy(), 0.0, dt, 2 * steps, box)
    piecewise = _advance(FIRST, start.copy(), 0.0, dt, steps, box)
    piecewise = _advance(SECOND, piecewise, TAU, dt, steps, box)
    scale = np.abs(piecewise).max()
    np.testing.assert_allclose(renovated, piecewise, rtol=0, atol=1e-13 * scale)
