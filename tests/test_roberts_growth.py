"""Roberts-flow dynamo growth rates from kindyn's 3-D time stepping against a dense eigen-solve.

Flow: Roberts (1972, Phil. Trans. R. Soc. Lond. A 271, 411), both published forms that kindyn
offers (``form = "sum"``, the default, and ``form = "product"``), U = 1, k = 1. The flow does not
depend on z, so ``B ~ b(x, y) exp(i kz z + p t)`` with a fixed ``kz``. kindyn integrates the full
3-D field in a box of height ``Lz = 2 pi / kz``; with ``nz = 4`` or ``5`` the 2/3 rule keeps the
vertical mode numbers ``m = 0, +-1`` only, i.e. exactly the ``kz`` sector (the ``m = 0`` sector is
a planar field and decays by Zeldovich's antidynamo theorem).

Reference: ``tests/reference/roberts_galerkin.py``, an independent dense Galerkin eigen-solver
(scipy.linalg.eigvals on the Fourier-truncated operator; it imports nothing from kindyn).

* Against the converged reference (truncation M = 12 for the sum form, converged to < 1e-10 for
  eta >= 0.1 according to the reference's docstring; M = 10 for the product form at eta = 0.2,
  converged to 1e-9, measured): agreement to 1e-3 relative, as the core issue asks.
* Against the reference at the SAME truncation: kindyn's 2/3-rule band on an ``n x n`` grid is the
  square ``|m|, |n| <= (n-1)//3``, and the flow has ``|m| <= 1``, so the product ``u x B`` never
  aliases onto a kept mode: kindyn's semi-discrete operator IS the Galerkin matrix with
  ``M = (n-1)//3``. What is left is the RK4 time-step error and the estimator: the difference must
  lie within the reported uncertainty (+ 1e-7). Measured: 1.7e-7, -6.1e-7, 1.1e-8 with reported
  uncertainties 9.9e-7, 8.6e-7, 8.1e-7; against the converged reference 1.7e-6, -5.6e-6, -4.3e-7
  relative.

The reference's author measured for the sum form, M = 16: (eta, kz) = (0.2, 0.5):
p1 = +0.1673545908 (real; next -0.1923); (0.1, 0.7): p1 = +0.1547001362 (next -0.1536 +- 0.531i).

Time-periodic flow: the Galloway-Proctor flow (Galloway & Proctor 1992, Nature 356, 691) against the
reference's Floquet multipliers (period map by a 4th-order Magnus scheme), through kindyn's
once-per-period strobed estimator. Runtime of this file: ~20 s.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import pytest

from kindyn.case import load_case
from kindyn.run import run_growth

try:  # `python -m pytest` from the repository root puts the root on sys.path
    from tests.reference import roberts_galerkin as rg
except ImportError:  # plain `pytest` with rootdir-relative imports
    from reference import roberts_galerkin as rg


@functools.lru_cache(maxsize=None)
def reference_eigenvalues(form: str, eta: float, kz: float, M: int) -> np.ndarray:
    """Leading eigenvalues (sorted by real part) of the solenoidal, zero-mean Galerkin operator."""
    coefficients = rg.roberts_velocity_coefficients(1.0, form)
    centre = rg.roberts_rotation_centre(1.0, form)
    return rg.leading_eigenvalues(coefficients, 1.0, kz, eta, M, count=3, c4_centre=centre)


def roberts_case(write_case, form, eta, kz, grid, tolerance=1e-6):
    return load_case(write_case(f"""
        [domain]
        lengths = ["2*pi", "2*pi", {2 * math.pi / kz!r}]
        grid = {list(grid)}
        [flow]
        type = "roberts"
        form = "{form}"
        [magnetic]
        eta = {eta!r}
        seed = 3
        [run]
        tolerance = {tolerance!r}
        [numerics]
        planning = "estimate"
    """))


CASES = [  # (form, eta, kz, grid, converged truncation)
    ("sum", 0.2, 0.5, (16, 16, 4), 12),
    ("sum", 0.1, 0.7, (22, 22, 5), 12),
    ("product", 0.2, 0.5, (25, 25, 4), 10),
]


def test_reference_reproduces_its_documented_values():
    # the reference's own documented numbers (its author, M = 16) at M = 12: 1e-9 relative
    assert reference_eigenvalues("sum", 0.2, 0.5, 12)[0] == pytest.approx(0.1673545908, rel=1e-9, abs=1e-10)
    assert reference_eigenvalues("sum", 0.1, 0.7, 12)[0] == pytest.approx(0.1547001362, rel=1e-9, abs=1e-10)


@pytest.mark.parametrize("form,eta,kz,grid,M_converged", CASES,
                         ids=[f"{c[0]}-eta{c[1]}-kz{c[2]}-{c[3][0]}x{c[3][1]}x{c[3][2]}" for c in CASES])
def test_growth_rate_matches_dense_galerkin_reference(write_case, form, eta, kz, grid, M_converged):
    case = roberts_case(write_case, form, eta, kz, grid)
    outcome = run_growth(case)
    e = outcome.estimate
    converged = reference_eigenvalues(form, eta, kz, M_converged)[0]
    same = reference_eigenvalues(form, eta, kz, (grid[0] - 1) // 3)[0]
    assert abs(converged.imag) < 1e-10 and converged.real > 0  # a growing, non-oscillatory mode
    assert e.converged, e.note
    assert e.growth_rate == pytest.approx(converged.real, rel=1e-3)
    assert e.error <= 1e-6
    # the reported uncertainty covers the difference (plus 1e-7 for the RK4 time-step error)
    assert abs(e.growth_rate - same.real) <= e.error + 1e-7
    assert e.frequency == 0.0
    assert not outcome.resolution_warning
    # Rm = U/(eta k_f): k_f = k for the sum form, sqrt(2) k for the product form (kindyn's flows)
    assert case.Rm == pytest.approx(1.0 / (eta * (1.0 if form == "sum" else math.sqrt(2))), rel=1e-14)


@functools.lru_cache(maxsize=None)
def floquet_exponent(eta: float, kz: float, M: int, steps: int, polarisation: str) -> complex:
    """Leading Floquet exponent ``ln(mu)/T`` of the Galloway-Proctor flow (U = k = eps = omega = 1)."""
    mu = rg.floquet_multipliers(
        lambda t: rg.galloway_proctor_velocity_coefficients(t, 1.0, 1.0, 1.0, polarisation),
        1.0, kz, eta, M, 2 * math.pi, steps)
    return complex(np.log(complex(mu[0])) / (2 * math.pi))


def test_time_periodic_galloway_proctor_growth_matches_floquet_reference(write_case):
    # Galloway & Proctor (1992, Nature 356, 691) flow, circular polarisation, eps = omega = 1,
    # eta = 0.2, kz = 0.57: kindyn strobes the record once per flow period; the reference computes
    # the period map with a 4th-order Magnus scheme (48 steps; the exponent changes by 1e-6 from
    # 32 to 64 steps) at the same truncation M = 5 as the 16 x 16 grid (M = 8 differs by 4e-6
    # relative; measured once, too slow for a test). Measured: kindyn 0.20761326 +- 6e-15,
    # reference 0.20761337 -> difference 1e-7 (RK4 time step of kindyn plus the Magnus error).
    # omega: the Floquet frequency modulo the flow frequency 1, reported in [0, 1/2].
    eta, kz = 0.2, 0.57
    case = load_case(write_case(f"""
        [domain]
        lengths = ["2*pi", "2*pi", {2 * math.pi / kz!r}]
        grid = [16, 16, 4]
        [flow]
        type = "galloway-proctor"
        polarisation = "circular"
        [magnetic]
        eta = {eta!r}
        [run]
        tolerance = 1e-5
        [numerics]
        planning = "estimate"
    """))
    outcome = run_growth(case)
    e = outcome.estimate
    p = floquet_exponent(eta, kz, 5, 48, "circular")
    assert e.converged, e.note
    assert e.growth_rate == pytest.approx(p.real, abs=1e-6)
    assert e.frequency == pytest.approx(abs(p.imag), rel=1e-4)
    assert outcome.timing.samples_per_strobe >= 1
    # the run strobes whole flow periods: the fit window starts and ends on whole periods
    period = 2 * math.pi
    for edge in e.window:
        assert edge / period == pytest.approx(round(edge / period), abs=1e-9)
