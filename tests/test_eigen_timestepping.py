"""Krylov eigenvalues against time-stepping, exact eigenmodes and the branch of the angle.

* ABC flow (A = B = C = 1, k = 1; Arnold 1965; Dombre et al. 1986, J. Fluid Mech. 167, 353) at
  Rm = 12, inside its first dynamo window (first window roughly 8.9 < Rm < 17.5, from memory of
  Arnold & Korkina 1983 and Galanti, Pouquet & Sulem 1992 - here only used to pick the case): the
  leading eigenvalue equals the converged growth rate of ``kindyn.run.run_growth`` within its error.
* Roberts flow (Roberts 1972) in a 3-D box: same comparison.
* Exact: for a Beltrami flow (``curl u = k u``) ``B = u`` gives ``u x B = 0``, so ``B = u`` decays
  at exactly ``p = -eta k^2`` (common practice; e.g. Moffatt 1978, CUP); the solver must list it.
* The conversion mu -> p and its branch: exact values, and a long propagation time (|omega| T > pi)
  resolved by the second propagation over T/2.

Runtime: about 12 s on two idle cores.
"""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest

from kindyn.case import load_case
from kindyn.eigen.krylov import eigenvalues_from_multipliers, leading_eigenpairs, resolve_branch
from kindyn.eigen.propagator import box_propagator
from kindyn.eigen.solve import solve_modes
from kindyn.flows.beltrami import ABCFlow
from kindyn.box import Box
from kindyn.run import run_growth

ABC_CASE = """
[domain]
grid = [16, 16, 16]
[flow]
type = "abc"
[magnetic]
Rm = 12.0
seed = 7
[run]
tolerance = 2e-4
max_time = 3000.0
[modes]
count = 2
"""

ROBERTS_CASE = """
[domain]
lengths = ["2*pi", "2*pi", "4*pi"]
grid = [16, 16, 4]
[flow]
type = "roberts"
[magnetic]
eta = 0.2
seed = 3
[run]
tolerance = 1e-5
[modes]
count = 2
method = "box"
"""


def _case(tmp_path, text, name):
    path = tmp_path / f"{name}.toml"
    path.write_text(text)
    return load_case(path)


def test_abc_leading_eigenvalue_equals_converged_time_stepping(tmp_path):
    case = _case(tmp_path, ABC_CASE, "abc")
    outcome = solve_modes(case, with_fields=False)
    lead = outcome.leading
    # the same discretisation both ways: compare with the growth estimator itself (the grid is
    # flagged by the spectrum criterion, so the run's reported error also carries a grid dependence)
    run = run_growth(case).estimator
    assert run.converged
    assert abs(lead.growth_rate - run.growth_rate) <= max(run.error, 2e-5)
    assert abs(abs(lead.frequency) - run.frequency) < 2e-3  # run's frequency: snapshot fit
    assert lead.growth_rate > 0 and lead.residual < 1e-9
    assert outcome.modes[1].eigenvalue == pytest.approx(lead.eigenvalue.conjugate(), abs=1e-9)


def test_roberts_box_leading_eigenvalue_equals_time_stepping(tmp_path):
    case = _case(tmp_path, ROBERTS_CASE, "roberts")
    outcome = solve_modes(case, with_fields=False)
    run = run_growth(case).estimate
    assert run.converged
    assert abs(outcome.leading.growth_rate - run.growth_rate) <= max(run.error, 1e-6)
    assert outcome.method == "box" and outcome.z_independent


def test_beltrami_flow_itself_is_an_exact_decaying_mode():
    eta = 1 / 12
    box = Box((2 * math.pi,) * 3, (8, 8, 8))
    solution = leading_eigenpairs(box_propagator(box, ABCFlow(), eta, 0.05, 10), 8, tolerance=1e-12)
    assert np.min(np.abs(solution.eigenvalues - (-eta * 1.0**2))) < 1e-10


def test_multiplier_conversion_and_branch_are_exact():
    T = 0.5
    p = complex(-0.3, 2.0)
    mu = cmath.exp(p * T)
    np.testing.assert_allclose(eigenvalues_from_multipliers([mu], T), [p], rtol=0, atol=1e-14)
    # |omega| T > pi: the principal angle is off by one branch; the T/2 quotient restores it
    fast = complex(0.1, 9.0)
    principal = eigenvalues_from_multipliers([cmath.exp(fast * T)], T)[0]
    assert principal.imag == pytest.approx(9.0 - 2 * math.pi / T)
    resolved, shift = resolve_branch(principal, cmath.exp(fast * T / 2), T, T / 2)
    assert shift == 1 and resolved == pytest.approx(fast, abs=1e-12)


def test_long_propagation_time_resolves_the_frequency_branch():
    # ABC on 8^3 at eta = 0.1: an oscillatory leading pair; T = 8 puts |omega| T beyond pi
    box = Box((2 * math.pi,) * 3, (8, 8, 8))
    short = leading_eigenpairs(box_propagator(box, ABCFlow(), 0.1, 0.1, 4), 2, tolerance=1e-12)
    long = leading_eigenpairs(box_propagator(box, ABCFlow(), 0.1, 0.1, 80), 2, tolerance=1e-12)
    omega = abs(short.eigenvalues[0].imag)
    assert omega * 8.0 > math.pi  # the case really needs the branch check
    np.testing.assert_allclose(sorted(long.eigenvalues, key=lambda p: p.imag),
                               sorted(short.eigenvalues, key=lambda p: p.imag), rtol=0, atol=1e-8)
    assert np.all(np.abs(long.branch_shifts) >= 1)
