"""The mean-field growth rate of a mode from test fields at its own growth rate (memory) and with its
harmonics coupled: the prediction that should match a direct run exactly (steady flows).

A mean-field mode ``Bbar(s) exp(p t)`` of a steady flow drives fluctuations ``b exp(p t)`` with
``(p + eta |k|^2 - P N) b = P curl(u x Bbar)``: the test problems with the diffusion shifted by ``p``
(:func:`kindyn.testfield.steady.full_solution` with ``shift = p``). Coefficients measured at ``p = 0``
(steady test fields) miss this memory effect, which is of relative size ``p/(eta k_f^2)``
(Hubbard & Brandenburg 2009, ApJ 706, 712, on memory effects in test-field coefficients —
recalled from memory). The planar mean of a mode of a flow with ``m_f`` periods along ``s`` in the box
(``L_s = m_f x`` the flow's period) holds the harmonics ``n' = +-n (mod m_f)``; their coupling is
the ``s``-dependence of the coefficients. With every harmonic and ``p`` self-consistent, the
mean-field eigenvalue is the eigenvalue of the discretised induction operator itself (the mean and
fluctuation equations are an exact split of it); coupling the harmonics up to a finite order
(:func:`harmonic_levels`) is a truncation, and the change from the previous order is reported as
its error.

Real representation (averaging axis ``s``, perpendicular components ``p < q``): the state of
harmonic ``n'`` is ``(B_p^c, B_p^s, B_q^c, B_q^s)`` (coefficients of ``cos K' s`` and ``sin K' s``);
the test fields ``e_p cos, e_p sin, e_q cos, e_q sin`` give the columns; the EMF of each is projected
on ``cos K'' s``, ``sin K'' s`` of every harmonic ``K''``; and ``d Bbar/dt = curl Ebar - eta K''^2 Bbar``
with ``(curl E)_i = eps_isj d_s E_j``, ``d_s (a cos + b sin) = K (b cos - a sin)``. The leading
eigenvalue of that ``4H x 4H`` matrix ``M(p)`` is solved for ``p = lambda(M(p))``: the root nearest
to ``p = 0`` (:func:`memory_growth_rate`; with strong memory there can be several, one per mode).
"""

from __future__ import annotations

import math

import numpy as np

from kindyn.errors import NumericalError
from kindyn.testfield import steady
from kindyn.testfield.fields import sinusoidal_test_fields
from kindyn.testfield.full_set import EPS
from kindyn.testfield.problems import TestProblems

MAX_ITERATIONS = 24


def harmonic_levels(mode: int, periods: int, order: int, kept: int) -> list[list[int]]:
    """Mode numbers coupled to ``mode`` by a flow with ``periods`` periods in the box, by coupling order:
    level 0 is ``[mode]``, level ``j + 1`` the new ``|n - periods|``, ``n + periods`` of level ``j``
    (each ``1 <= n' <= kept``), up to ``order`` levels."""
    levels, seen = [[mode]], {mode}
    for _ in range(order):
        nxt = sorted({m for n in levels[-1] for m in (abs(n - periods), n + periods) if 1 <= m <= kept} - seen)
        if not nxt:
            break
        seen.update(nxt)
        levels.append(nxt)
    return levels


def projections(emf: np.ndarray, s: np.ndarray, Ks, perp) -> np.ndarray:
    """``(4 H,)``: ``(E_p^c, E_p^s, E_q^c, E_q^s)`` of an EMF profile ``(3, n_s)`` for every ``K`` of ``Ks``."""
    out = []
    for K in Ks:
        c, sn = np.cos(K * s), np.sin(K * s)
        for i in perp:
            out += [2 * np.mean(emf[i] * c), 2 * np.mean(emf[i] * sn)]
    return np.array(out)


def mean_field_matrix(response: np.ndarray, Ks, eta: float, axis: int) -> np.ndarray:
    """``M`` of the module docstring from ``response`` (``4H x 4H``: rows = projections, columns = tests)."""
    perp = [j for j in range(3) if j != axis]
    H = len(Ks)
    M = np.zeros((4 * H, 4 * H))
    for a, K in enumerate(Ks):
        rows = response[4 * a:4 * a + 4]  # E_p^c, E_p^s, E_q^c, E_q^s
        E = {(perp[0], "c"): rows[0], (perp[0], "s"): rows[1], (perp[1], "c"): rows[2], (perp[1], "s"): rows[3]}
        for r, i in enumerate(perp):
            j = perp[1 - r]
            sign = EPS[i, axis, j]  # (curl E)_i = eps_isj d_s E_j
            # d_s (E_j^c cos + E_j^s sin) = K (E_j^s cos - E_j^c sin)
            M[4 * a + 2 * r] += sign * K * E[(j, "s")]
            M[4 * a + 2 * r + 1] -= sign * K * E[(j, "c")]
        M[4 * a:4 * a + 4, 4 * a:4 * a + 4] -= eta * K ** 2 * np.eye(4)
    return M


class ShiftedResponses:
    """The EMF response matrix of the harmonics of one mode at a growth rate ``p`` (steady flows)."""

    def __init__(self, layout, flow, eta: float, axis: int, modes, length: float, tolerance: float, kernels=None,
                 soca: bool = False):
        self.layout, self.flow, self.eta, self.axis, self.soca = layout, flow, float(eta), axis, soca
        self.modes = list(modes)
        self.Ks = [2 * math.pi * n / length for n in self.modes]
        self.perp = [j for j in range(3) if j != axis]
        self.s = np.arange(layout.grid[axis]) * (length / layout.grid[axis])
        self.tolerance = tolerance
        self.problems = [TestProblems(layout, flow, eta, [f], axis, kernels=kernels)
                         for n, K in zip(self.modes, self.Ks) for f in sinusoidal_test_fields(axis, n, K)]
        self.applications = 0

    @property
    def singular_limit(self) -> float:
        """``-min eta |k|^2`` over the kept fluctuation modes: the shifted problems are singular at and below it."""
        op = self.problems[0]
        layout = self.layout
        mean = np.broadcast_to(layout.mean_mode_mask(self.axis), op.decay_rates.shape)
        kept = np.broadcast_to(layout.dealias_mask, op.decay_rates.shape) & ~mean
        return -float(np.min(op.decay_rates[kept]))

    def response(self, p: float) -> np.ndarray:
        columns = []
        for op in self.problems:
            if self.soca:
                b = steady.soca_solution(op, shift=p)
            else:
                b, info = steady.full_solution(op, self.tolerance, shift=p)
                self.applications += info["iterations"]
            columns.append(projections(op.emf(0.0, b)[0], self.s, self.Ks, self.perp))
        return np.stack(columns, axis=1)

    def eigenvalues(self, p: float) -> np.ndarray:
        return np.linalg.eigvals(mean_field_matrix(self.response(p), self.Ks, self.eta, self.axis))


def _pick(values: np.ndarray, near: float | None) -> complex:
    if near is None:
        return complex(values[np.argmax(values.real)])
    return complex(values[np.argmin(np.abs(values - near))])


def memory_growth_rate(responses: ShiftedResponses, start: float | None = None, tolerance: float = 1e-10) -> dict:
    """``p`` with ``p = lambda(M(p))`` (module docstring): ``{"p", "frequency", "iterations", "change",
    "steady_p"}``; ``steady_p`` is the leading eigenvalue at ``p = 0`` (steady coefficients, harmonics
    coupled), ``change`` the width of the final bracket.

    ``g(p) = lambda(p) - p`` can have several roots when memory is strong (several modes of the same K);
    the leading mode is the root nearest to ``p = 0`` in the direction of ``g(0)``: steps from ``0`` (the
    first to ``lambda(0)``, then doubling) until ``g`` changes sign, then the Illinois variant of regula
    falsi inside that bracket. ``start`` (a nearby root, e.g. with fewer harmonics) replaces 0 as the
    starting point when it is on the same side. Complex leading eigenvalues are iterated on their real
    part (an approximation, said by ``frequency > 0``)."""
    evaluations = {"n": 0}
    steady_value = _pick(responses.eigenvalues(0.0), None)
    last = {"value": steady_value}

    def g(p):
        evaluations["n"] += 1
        last["value"] = _pick(responses.eigenvalues(p), None)
        return last["value"].real - p

    scale = max(abs(steady_value.real), 1e-300)
    x0, g0 = 0.0, steady_value.real
    if start is not None and math.isfinite(start):
        gs = g(start)
        if gs == 0:
            return _result(start, last["value"], evaluations["n"], 0.0, steady_value)
        if math.copysign(1.0, gs) == math.copysign(1.0, g0):
            x0, g0 = float(start), gs
        else:  # a root between 0 and start: bracket directly
            return _illinois(g, 0.0, steady_value.real, float(start), gs, tolerance, scale, last, evaluations,
                             steady_value)
    if g0 == 0:
        return _result(x0, steady_value, evaluations["n"], 0.0, steady_value)
    direction = math.copysign(1.0, g0)
    step = abs(g0)
    x1, g1 = x0, g0
    floor = getattr(responses, "singular_limit", -math.inf)
    for _ in range(MAX_ITERATIONS):
        x2 = x1 + direction * step
        if direction < 0 and x2 <= floor + 1e-9 * abs(floor):
            x2 = 0.5 * (x1 + floor)  # approach the singular limit, never reach it
        g2 = g(x2)
        if g2 == 0:
            return _result(x2, last["value"], evaluations["n"], 0.0, steady_value)
        if math.copysign(1.0, g2) != math.copysign(1.0, g1):
            return _illinois(g, x1, g1, x2, g2, tolerance, scale, last, evaluations, steady_value)
        x1, g1 = x2, g2
        step *= 2.0
    raise NumericalError(f"no mean-field growth rate consistent with its own coefficients was bracketed after "
                         f"{evaluations['n']} evaluations (last p = {x1:.6g}, lambda(p) - p = {g1:.3g})")


def _illinois(g, a, ga, b, gb, tolerance, scale, last, evaluations, steady_value) -> dict:
    """Root of ``g`` in the bracket ``[a, b]`` (Illinois regula falsi); ``change`` is the last correction."""
    side, previous = 0, b
    for _ in range(4 * MAX_ITERATIONS):
        c = (a * gb - b * ga) / (gb - ga)
        gc = g(c)
        change = abs(c - previous)
        if gc == 0 or change <= tolerance * max(1.0, abs(c)):
            return _result(c, last["value"], evaluations["n"], change, steady_value)
        previous = c
        if math.copysign(1.0, gc) == math.copysign(1.0, gb):
            b, gb = c, gc
            if side == -1:
                ga *= 0.5
            side = -1
        else:
            a, ga = c, gc
            if side == 1:
                gb *= 0.5
            side = 1
    return _result(c, last["value"], evaluations["n"], max(change, abs(b - a)), steady_value)


def _result(p, value, iterations, change, steady_value) -> dict:
    return {"p": float(p), "frequency": abs(value.imag), "iterations": iterations, "change": float(change),
            "steady_p": steady_value.real, "steady_frequency": abs(steady_value.imag)}
