"""The solver against exact solutions of the induction equation ``dB/dt = curl(u x B) + eta Lap B``.

Sources (outside kindyn):

* ``u = 0``: every Fourier mode decays as ``exp(-eta |k|^2 t)`` (exact solution of the heat equation).
* uniform ``u = U``: ``curl(U x B) = -(U . grad) B`` for ``div B = 0``, so each mode is
  ``b(k, t) = b(k, 0) exp(-i k.U t - eta |k|^2 t)`` (exact). For the integrating-factor (Lawson)
  scheme the linear parts commute, so one step multiplies each mode by exactly
  ``exp(-eta k^2 h) R(-i k.U h)`` with ``R(z) = sum_{j <= s} z^j / j!`` the stability polynomial of
  any explicit s-stage Runge-Kutta method of order s <= 4 (Hairer, Norsett & Wanner 1993, *Solving
  Ordinary Differential Equations I*, Springer, Sec. IV.2): checked to round-off.
* ABC flow with ``B(0) = u``: ``u`` is Beltrami (``curl u = k u``), so ``u x B = u x u = 0`` and
  ``Lap u = -k^2 u``; hence ``B(t) = u exp(-eta k^2 t)`` exactly (derived here; the ABC flow as in
  Dombre et al. 1986, J. Fluid Mech. 167, 353).
* Temporal order of the Runge-Kutta schemes by halving the step on the time-periodic
  Galloway-Proctor flow (Galloway & Proctor 1992, Nature 356, 691): 4, 3, 2 for rk4, rk3, rk2
  (Kutta 1901; order conditions: Butcher 1963, J. Austral. Math. Soc. 3, 185).

Grids are small (7^3 to 16^3); odd, even and non-cubic grids and box lengths other than 2 pi are
covered. Tolerances are stated with each check.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np
import pytest

from kindyn.box import Box
from kindyn.calculus import divergence_hat
from kindyn.case import load_case
from kindyn.case.schema import RUN
from kindyn.diagnostics.spectra import energy
from kindyn.initial_fields import flow_field_hat, random_field_hat
from kindyn.layout import BoxLayout
from kindyn.flows import ABCFlow, GallowayProctorFlow
from kindyn.array_kernels import numba_available
from kindyn.run import build_solver, run_growth
from kindyn.stepping import TABLEAUX
from kindyn.transforms import ENGINES, TransformSettings, make_engine, physical_from_spectral, spectral_from_physical

TWO_PI = 2 * math.pi

# (lengths, grid): cubic even, cubic odd, non-cubic mixed, non-2pi lengths with odd and even sizes
BOXES = [
    ((TWO_PI, TWO_PI, TWO_PI), (8, 8, 8)),
    ((TWO_PI, TWO_PI, TWO_PI), (9, 9, 9)),
    ((TWO_PI, TWO_PI, TWO_PI), (12, 10, 7)),
    ((3.0, 5.5, 1.7), (10, 9, 12)),
]
BOX_IDS = ["8^3", "9^3", "12x10x7", "L=3,5.5,1.7"]


@dataclass(frozen=True)
class UniformFlow:
    """``u = U`` everywhere (satisfies the flow protocol of kindyn/flows/base.py). ``U = 0``: no flow."""

    U: tuple[float, float, float] = (0.0, 0.0, 0.0)
    speed = 1.0  # only used to define Rm; irrelevant here
    wavenumber = 1.0
    period = None
    steady = True
    z_independent = True

    def velocity(self, x, y, z, t):
        return tuple(np.full((1, 1, 1), float(c)) for c in self.U)

    def check_box(self, box) -> None:
        pass


def settings(engine: str = "fftw", precision: str = "double", kernels: str = "auto") -> TransformSettings:
    threads = 2 if kernels == "numba" else 1  # FFTW on 2 threads; the kernels' threads are measured
    return TransformSettings(engine=engine, threads=threads, planning="estimate", precision=precision,
                             array_kernels=kernels)


# the array-kernel sets of kindyn.array_kernels: numpy always, numba where installed
KERNEL_SETS = ["numpy"] + (["numba"] if numba_available() else [])


def advance(solver, b_hat, h, steps, t0=0.0):
    for n in range(steps):
        solver.stepper.step(t0 + n * h, b_hat, h)
    return b_hat


def relative_max(a, b) -> float:
    return float(np.max(np.abs(a - b)) / np.max(np.abs(b)))


def stability_polynomial(z, order: int):
    """``R(z) = sum_{j<=order} z^j/j!``: any explicit RK with stages = order <= 4 (HNW 1993, IV.2)."""
    return sum(z**j / math.factorial(j) for j in range(order + 1))


# ----------------------------------------------------------------------------------- initial field
@pytest.mark.parametrize("lengths,grid", BOXES, ids=BOX_IDS)
def test_random_initial_field_is_solenoidal_zero_mean_in_band(lengths, grid):
    # design.md 1: seeded solenoidal initial field with zero mean and unit energy, dealiased
    box = Box(lengths, grid)
    engine = make_engine(box, settings())
    b_hat = random_field_hat(BoxLayout(box), seed=3, peak_wavenumber=2.0)
    k_max = math.sqrt(float(box.k_squared.max()))
    assert np.max(np.abs(divergence_hat(b_hat, box))) <= 1e-14 * k_max * np.max(np.abs(b_hat))
    assert np.all(b_hat[:, 0, 0, 0] == 0)
    assert np.all(b_hat[:, ~box.dealias_mask] == 0)
    assert energy(b_hat, BoxLayout(box)) == pytest.approx(1.0, rel=1e-13)
    # Parseval against the grid values: <|B|^2>/2 in physical space (common practice)
    b = physical_from_spectral(engine, b_hat)
    assert 0.5 * np.mean(np.sum(b**2, axis=0)) == pytest.approx(1.0, rel=1e-12)
    again = random_field_hat(BoxLayout(box), seed=3, peak_wavenumber=2.0)
    other = random_field_hat(BoxLayout(box), seed=4, peak_wavenumber=2.0)
    assert np.array_equal(again, b_hat)
    assert relative_max(other, b_hat) > 0.1


@pytest.mark.parametrize("engine_name", ENGINES)
@pytest.mark.parametrize("lengths,grid", BOXES, ids=BOX_IDS)
def test_transform_normalisation_is_fourier_coefficients(engine_name, lengths, grid):
    # f = 1 + 2 cos(k.x) with k = (2 pi/Lx, 2*2 pi/Ly, 2 pi/Lz): f_hat(0) = 1, f_hat(+-k) = 1 (exact)
    box = Box(lengths, grid)
    engine = make_engine(box, settings(engine_name))
    x, y, z = box.coordinates
    kx, ky, kz = (TWO_PI * m / L for m, L in zip((1, 2, 1), lengths))
    f = np.broadcast_to(1 + 2 * np.cos(kx * x + ky * y + kz * z), box.shape)
    f_hat = spectral_from_physical(engine, np.stack([f, 0 * f, f]))
    expected = np.zeros(box.spectral_shape, complex)
    expected[0, 0, 0] = 1.0
    expected[1, 2, 1] = 1.0  # +k; -k is the conjugate, not stored on the half grid (kz > 0)
    np.testing.assert_allclose(f_hat[0], expected, atol=1e-14)
    np.testing.assert_allclose(f_hat[1], 0, atol=1e-15)
    np.testing.assert_allclose(physical_from_spectral(engine, f_hat)[2], f, rtol=0, atol=1e-14)


# ---------------------------------------------------------------------------------------- u = 0
@pytest.mark.parametrize("kernels", KERNEL_SETS)
@pytest.mark.parametrize("engine_name", ENGINES)
@pytest.mark.parametrize("lengths,grid", BOXES, ids=BOX_IDS)
def test_no_flow_every_mode_decays_exactly(engine_name, lengths, grid, random_field, kernels):
    # exact: b(k, t) = b(k, 0) exp(-eta |k|^2 t); rtol 1e-13 (round-off of the exponentials)
    box, eta, h, steps = Box(lengths, grid), 0.37, 0.0123, 57
    solver = build_solver(box, UniformFlow(), eta, settings(engine_name, kernels=kernels))
    b0 = random_field(box, solver.engine, seed=11)
    b = advance(solver, b0.copy(), h, steps)
    expected = b0 * np.exp(-eta * box.k_squared * h * steps)
    assert np.max(np.abs(b - expected)) <= 1e-13 * np.max(np.abs(b0))
    # the highest kept modes have decayed by many orders: compare them relative to themselves
    kept = (np.abs(b0) > 0) & (np.abs(expected) > 1e-200)
    np.testing.assert_allclose(b[kept], expected[kept], rtol=1e-12)


# ------------------------------------------------------------------------------------ uniform u
@pytest.mark.parametrize("kernels", KERNEL_SETS)
@pytest.mark.parametrize("scheme", sorted(TABLEAUX))
@pytest.mark.parametrize("lengths,grid", BOXES, ids=BOX_IDS)
def test_uniform_flow_rotates_phase_times_decay(scheme, lengths, grid, random_field, kernels):
    box, eta, U, h, steps = Box(lengths, grid), 0.05, (0.3, -0.7, 0.45), 0.01, 100
    solver = build_solver(box, UniformFlow(U), eta, settings(kernels=kernels), scheme)
    b0 = random_field(box, solver.engine, seed=5)
    b = advance(solver, b0.copy(), h, steps)
    kx, ky, kz = box.wavenumbers
    theta = (kx * U[0] + ky * U[1] + kz * U[2]) * h  # phase per step, k.U h
    order = TABLEAUX[scheme].order
    decay = np.exp(-eta * box.k_squared * h * steps)
    # (1) the discrete solution of the Lawson scheme, to round-off (rtol 1e-12)
    discrete = b0 * decay * stability_polynomial(-1j * theta, order) ** steps
    assert np.max(np.abs(b - discrete)) <= 1e-12 * np.max(np.abs(b0))
    # (2) the exact solution, within the scheme's truncation error
    #     |R(i th) - e^{i th}| <= |th|^(s+1)/(s+1)! (1 + |th|), accumulated over the steps
    exact = b0 * decay * np.exp(-1j * theta * steps)
    bound = steps * np.abs(theta) ** (order + 1) / math.factorial(order + 1) * (1 + np.abs(theta))
    assert np.all(np.abs(b - exact) <= bound * np.abs(b0) * decay + 1e-13)
    if scheme == "rk4":
        assert relative_max(b, exact) < 1e-7  # measured 3e-8 on the 1.7-long axis, 1e-10 on 2 pi boxes


# ------------------------------------------------------------------------ ABC flow with B(0) = u
ABC_CASES = [  # (A, B, C, k, lengths, grid)
    (1.0, 1.0, 1.0, 1.0, (TWO_PI,) * 3, (8, 8, 8)),
    (1.0, 1.0, 1.0, 1.0, (TWO_PI,) * 3, (9, 11, 7)),
    (0.4, 1.3, -0.8, 2.0, (math.pi, math.pi, TWO_PI), (8, 7, 10)),
]


@pytest.mark.parametrize("kernels", KERNEL_SETS)
@pytest.mark.parametrize("engine_name", ENGINES)
@pytest.mark.parametrize("A,B,C,k,lengths,grid", ABC_CASES)
def test_abc_field_equal_to_flow_decays_exactly(engine_name, A, B, C, k, lengths, grid, kernels):
    # derived: curl(u x u) = 0 and Lap u = -k^2 u  =>  B(t) = u exp(-eta k^2 t); rtol 1e-12 after
    # 200 steps at CFL-size steps (the nonlinear term must vanish to round-off at every stage)
    box, eta = Box(lengths, grid), 0.1
    flow = ABCFlow(A, B, C, k)
    solver = build_solver(box, flow, eta, settings(engine_name, kernels=kernels))
    b0 = flow_field_hat(solver.layout, flow)
    h, steps = 0.05, 200
    b = advance(solver, b0.copy(), h, steps)
    assert relative_max(b, b0 * math.exp(-eta * k**2 * h * steps)) < 1e-12


def test_run_reports_exact_decay_rate_of_abc_field(write_case):
    # same exact solution through the whole run: gamma = -eta k^2, omega = 0 (k = 2 in a box of
    # lengths pi, pi, 2 pi; eta = U/(Rm k) = 1/(4*2) with U = sqrt((A^2+B^2+C^2)/3) = 1)
    path = write_case("""
        [domain]
        lengths = ["pi", "pi", "2*pi"]
        grid = [8, 7, 10]
        [flow]
        type = "abc"
        k = 2.0
        [magnetic]
        Rm = 4.0
        initial_field = "flow"
        [run]
        tolerance = 1e-8
        [numerics]
        planning = "estimate"
    """)
    outcome = run_growth(load_case(path))
    e = outcome.estimate
    assert e.converged
    assert e.growth_rate == pytest.approx(-0.125 * 4.0, rel=1e-9)
    assert e.frequency == 0.0
    assert e.error <= 1e-8
    # the record's probes times exp(log_amplitude) are the probes of the true (un-renormalised)
    # field, which the growth estimator relies on: here z(t) = z(0) exp(-eta k^2 t) exactly
    rec = outcome.record
    true_probes = np.asarray(rec.probes) * np.exp(np.asarray(rec.log_amplitude))[:, None]
    expected = true_probes[0] * np.exp(-0.5 * np.asarray(rec.times))[:, None]
    np.testing.assert_allclose(true_probes, expected, rtol=1e-11, atol=1e-13 * np.abs(true_probes[0]).max())


# --------------------------------------------------------------------------- div B at round-off
def test_div_b_stays_at_round_off_over_a_long_run(random_field):
    # div(curl) = 0 term by term and the diffusion is diagonal: |k.b_hat| / (|k|_max max|b_hat|)
    # stays at round-off (atol 1e-14) over 3000 steps at Rm = 12 (ABC; growing mode)
    box = Box((TWO_PI,) * 3, (12, 12, 12))
    solver = build_solver(box, ABCFlow(), 1 / 12, settings())
    b = random_field(box, solver.engine, seed=2)
    k_max = math.sqrt(float(box.k_squared[box.dealias_mask].max()))
    worst = 0.0
    for block in range(6):
        advance(solver, b, 1 / 30, 500, t0=block * 500 / 30)
        worst = max(worst, float(np.max(np.abs(divergence_hat(b, box))) / (k_max * np.max(np.abs(b)))))
    assert worst < 1e-14
    assert np.all(b[:, ~box.dealias_mask] == 0)  # the band is kept: nothing leaks past the 2/3 cut
    assert abs(b[:, 0, 0, 0]).max() == 0  # the neutral k = 0 mode stays zero


# ------------------------------------------------------------------------------ temporal order
def _galloway_proctor_errors(scheme: str, steps_list, b0, box, eta, T, reference):
    flow = GallowayProctorFlow(polarisation="circular")
    errors = []
    for n in steps_list:
        solver = build_solver(box, flow, eta, settings(), scheme)
        b = advance(solver, b0.copy(), T / n, n)
        errors.append(float(np.max(np.abs(b - reference))))
    return np.array(errors)


@pytest.fixture(scope="module")
def galloway_proctor_reference():
    box, eta, T = Box((TWO_PI,) * 3, (8, 8, 8)), 0.1, 1.3  # T: not a multiple of the period 2 pi
    solver = build_solver(box, GallowayProctorFlow(polarisation="circular"), eta, settings(), "rk4")
    b0 = random_field_hat(solver.layout, 7, 1.5)
    reference = advance(solver, b0.copy(), T / 1280, 1280)  # rk4 error ~1e-12 here
    return box, eta, T, b0, reference


@pytest.mark.parametrize("scheme", ["rk4", "rk3", "rk2"])
def test_temporal_order_on_time_periodic_flow(scheme, galloway_proctor_reference):
    # halving h divides the error by 2^order (observed order within 0.25 of the nominal one on the
    # two finest pairs); stage times t_n + c_i h matter here: the flow changes during a step
    box, eta, T, b0, reference = galloway_proctor_reference
    steps_list = [20, 40, 80, 160]
    errors = _galloway_proctor_errors(scheme, steps_list, b0, box, eta, T, reference)
    observed = np.log2(errors[:-1] / errors[1:])
    nominal = TABLEAUX[scheme].order
    assert errors[-1] > 1e-13  # still above round-off, so the ratios mean something
    assert np.all(np.abs(observed[-2:] - nominal) < 0.25), observed


# ------------------------------------------------------------------------- tableau consistency
def _butcher_conditions(tab):
    """Order conditions of an explicit RK tableau up to order 4 (Butcher 1963): (order, lhs, rhs)."""
    a = [[Fraction(0)] * tab.stages for _ in range(tab.stages)]
    for i, row in enumerate(tab.a):
        for j, v in enumerate(row):
            a[i][j] = Fraction(v).limit_denominator(10**6)
    b = [Fraction(v).limit_denominator(10**6) for v in tab.b]
    c = [Fraction(v).limit_denominator(10**6) for v in tab.c]
    s = range(tab.stages)
    ac = [sum(a[i][j] * c[j] for j in s) for i in s]
    return [
        (1, sum(b), Fraction(1)),
        (2, sum(b[i] * c[i] for i in s), Fraction(1, 2)),
        (3, sum(b[i] * c[i] ** 2 for i in s), Fraction(1, 3)),
        (3, sum(b[i] * ac[i] for i in s), Fraction(1, 6)),
        (4, sum(b[i] * c[i] ** 3 for i in s), Fraction(1, 4)),
        (4, sum(b[i] * c[i] * ac[i] for i in s), Fraction(1, 8)),
        (4, sum(b[i] * a[i][j] * c[j] ** 2 for i in s for j in s), Fraction(1, 12)),
        (4, sum(b[i] * a[i][j] * ac[j] for i in s for j in s), Fraction(1, 24)),
    ]


@pytest.mark.parametrize("name", sorted(TABLEAUX))
def test_tableau_consistency_and_order_conditions(name):
    # row sums equal c, weights sum to one, explicit (strictly lower triangular), and Butcher's
    # order conditions hold up to the declared order and not all at the next order (Butcher 1963)
    tab = TABLEAUX[name]
    assert tab.name == name
    assert len(tab.a) == len(tab.c) == tab.stages
    for i, row in enumerate(tab.a):
        assert len(row) == i
        assert sum(row) == pytest.approx(tab.c[i], abs=1e-15)
    assert sum(tab.b) == pytest.approx(1.0, abs=1e-15)
    conditions = _butcher_conditions(tab)
    for order, lhs, rhs in conditions:
        if order <= tab.order:
            assert lhs == rhs, (name, order, lhs, rhs)
    if tab.order < 4:
        assert any(lhs != rhs for order, lhs, rhs in conditions if order == tab.order + 1)


def test_every_scheme_is_selectable_in_a_case():
    # registry <-> case key table: every tableau can be named in [run] scheme, and nothing else
    for name in TABLEAUX:
        assert RUN["scheme"].convert(name) == name
    with pytest.raises(ValueError):
        RUN["scheme"].convert("euler-but-not-registered")


# ------------------------------------------------------------------------------- FFT engines
@pytest.mark.parametrize("flow,lengths,grid", [
    (ABCFlow(1.0, 0.7, 0.4), (TWO_PI, TWO_PI, 2 * TWO_PI), (9, 12, 10)),
    (GallowayProctorFlow(polarisation="linear"), (TWO_PI, TWO_PI, 3.0), (10, 11, 6)),
], ids=["abc", "galloway-proctor"])
def test_fft_engines_agree(flow, lengths, grid, random_field):
    # two independent FFT libraries (FFTW via pyfftw, scipy.fft/pocketfft): same result to
    # round-off after 40 steps (rtol 1e-12 on the largest coefficient)
    box = Box(lengths, grid)
    results = []
    for engine_name in ENGINES:
        solver = build_solver(box, flow, 0.08, settings(engine_name))
        b = random_field(box, solver.engine, seed=9)
        results.append(advance(solver, b, 0.02, 40))
    assert relative_max(results[0], results[1]) < 1e-12


# --------------------------------------------------------------------------- single precision
def test_single_precision_accuracy(random_field, write_case):
    """float32 mode (``numerics.precision = "single"``): measured accuracy, bounds ~3-5x above it.

    1. ABC with B(0) = u: the relative error against the exact ``u exp(-eta k^2 t)`` grows by
       about 2e-8 per step (float32 eps = 6e-8): measured 3.9e-6 after 200 steps (bound 1.5e-5;
       double precision: 1e-15).
    2. A random field at Rm = 12, 300 steps: measured relative difference to the double-precision
       run 3.8e-6 (bound 2e-5).
    3. A whole run (ABC, B(0) = u, Rm = 4, 8^3): growth rate within 4.7e-8 of the exact -eta k^2
       (bound 3e-7). The growth estimator's own error (1e-15) does not include this float32 bias;
       the run's reported error does, through its step-halving probe (round-off dominated in
       float32: measured 8.4e-7, three times that in the bound), so at tolerance 1e-6 the run says
       that it cannot meet the tolerance in single precision instead of claiming convergence.
    """
    box, eta, flow = Box((TWO_PI,) * 3, (12, 12, 12)), 1 / 12, ABCFlow()
    single = build_solver(box, flow, eta, settings(precision="single"))
    double = build_solver(box, flow, eta, settings(precision="double"))
    assert single.engine.spectral.dtype == np.complex64 and single.engine.real.dtype == np.float32

    b0 = flow_field_hat(double.layout, flow)
    b = advance(single, b0.astype(np.complex64), 0.05, 200)
    assert b.dtype == np.complex64
    assert relative_max(b.astype(complex), b0 * math.exp(-eta * 0.05 * 200)) < 1.5e-5

    r0 = random_field(box, double.engine, seed=4)
    r_double = advance(double, r0.copy(), 1 / 30, 300)
    r_single = advance(single, r0.astype(np.complex64), 1 / 30, 300)
    assert relative_max(r_single.astype(complex), r_double) < 2e-5

    path = write_case("""
        [domain]
        grid = [8, 8, 8]
        [flow]
        type = "abc"
        [magnetic]
        Rm = 4.0
        initial_field = "flow"
        [run]
        tolerance = 1e-6
        [numerics]
        planning = "estimate"
        precision = "single"
    """)
    outcome = run_growth(load_case(path))
    assert outcome.estimator.converged and not outcome.estimate.converged
    assert "single precision" in outcome.stop_reason
    assert abs(outcome.estimate.growth_rate + 0.25) < 3e-7
    assert abs(outcome.estimate.growth_rate + 0.25) <= outcome.estimate.error  # the bias is inside the error
