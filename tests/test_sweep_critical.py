"""Critical values and dynamo windows from synthetic gamma(Rm) data with known roots (no runs, < 1 s).

Synthetic data: ``gamma(Rm) = c (Rm - a)(b - Rm)`` (a parabola with roots ``a`` and ``b``), plus
seeded Gaussian noise of a stated size. Its roots are known exactly, so every located critical
value can be checked against them; the window is ``a < Rm < b``. The refinement loop is driven
by :func:`kindyn.sweep.critical.refinement_values` exactly as the sweep driver does, with the
synthetic function standing in for the runs. The uncertainty formula is checked against a finite-
difference derivative of the interpolated root (independent of the closed form).
"""

from __future__ import annotations

import numpy as np
import pytest

from kindyn.sweep.critical import dynamo_windows, linear_root, refinement_values, sign_changes

A_ROOT, B_ROOT, CURVATURE = 8.9, 17.5, 1e-3  # roots chosen like the ABC window; any values would do


def parabola(x):
    x = np.asarray(x, float)
    return CURVATURE * (x - A_ROOT) * (B_ROOT - x)


def test_two_sign_changes_are_found_and_bracket_the_roots():
    x = np.array([5.0, 8.0, 11.0, 14.0, 17.0, 20.0])
    crossings = sign_changes(x, parabola(x), np.full(x.size, 1e-6))
    assert [c.direction for c in crossings] == ["opens", "closes"]
    for c, root in zip(crossings, (A_ROOT, B_ROOT)):
        assert c.bracket[0] < root < c.bracket[1]
        # the linear root is off by the curvature; the stated uncertainty must cover the true error
        assert abs(c.value - root) <= c.uncertainty
        assert c.uncertainty < 0.5 * (c.bracket[1] - c.bracket[0])


def test_order_of_the_points_does_not_matter():
    x = np.array([20.0, 5.0, 14.0, 8.0, 11.0, 17.0])
    sorted_x = np.sort(x)
    a = sign_changes(x, parabola(x), np.full(6, 1e-6))
    b = sign_changes(sorted_x, parabola(sorted_x), np.full(6, 1e-6))
    assert [c.value for c in a] == [c.value for c in b]


def test_linear_data_give_the_exact_root_with_propagated_errors():
    # gamma = 0.01 (x - 12.3): linear interpolation is exact; uncertainty from sigma only
    x = np.array([10.0, 11.0, 13.0, 15.0])
    sigma = np.array([1e-4, 2e-4, 3e-4, 1e-4])
    (c,) = sign_changes(x, 0.01 * (x - 12.3), sigma)
    assert c.value == pytest.approx(12.3, abs=1e-12)
    # finite-difference propagation of the two end errors through x* = x0 - g0 (x1-x0)/(g1-g0)
    x0, x1, g0, g1, h = 11.0, 13.0, 0.01 * (11 - 12.3), 0.01 * (13 - 12.3), 1e-7
    d0 = (linear_root(x0, x1, g0 + h, g1) - linear_root(x0, x1, g0 - h, g1)) / (2 * h)
    d1 = (linear_root(x0, x1, g0, g1 + h) - linear_root(x0, x1, g0, g1 - h)) / (2 * h)
    expected = np.hypot(d0 * 2e-4, d1 * 3e-4)
    assert c.statistical == pytest.approx(expected, rel=1e-6)
    assert c.uncertainty == pytest.approx(expected, rel=1e-6, abs=1e-9)  # quadratic correction vanishes


def test_windows_open_and_close_and_report_ends_outside_the_scan():
    x = np.array([5.0, 8.0, 11.0, 14.0, 17.0, 20.0])
    (w,) = dynamo_windows(sign_changes(x, parabola(x), np.zeros(6)), x, parabola(x))
    assert w.lower.value < w.upper.value and w.lower.direction == "opens"
    # a scan starting inside the window: the lower end lies below the scanned range
    inner = np.array([10.0, 14.0, 20.0])
    (w,) = dynamo_windows(sign_changes(inner, parabola(inner), np.zeros(3)), inner, parabola(inner))
    assert w.lower is None and w.upper.bracket == (14.0, 20.0) and w.scan == (10.0, 20.0)
    decaying = np.array([20.0, 22.0])
    assert dynamo_windows([], decaying, parabola(decaying)) == []
    growing = np.array([10.0, 12.0])
    (w,) = dynamo_windows([], growing, parabola(growing))
    assert w.lower is None and w.upper is None


def refine(x, gamma_of, sigma, runs=6, width=1e-3, per_crossing=1, rng=None):
    """The driver's loop with a synthetic gamma: rounds of proposals until none is left."""
    x = list(x)
    flags = [False] * len(x)
    noise = (lambda n: rng.normal(0.0, sigma, n)) if rng is not None else (lambda n: np.zeros(n))
    gamma = list(gamma_of(np.array(x)) + noise(len(x)))
    for _ in range(runs):
        new = refinement_values(x, gamma, [sigma] * len(x), flags, runs, width, per_crossing)
        if not new:
            break
        x += new
        flags += [True] * len(new)
        gamma += list(gamma_of(np.array(new)) + noise(len(new)))
    return np.array(x), np.array(gamma), flags


@pytest.mark.parametrize("per_crossing", [1, 3])
def test_refinement_narrows_both_brackets_to_the_known_roots(per_crossing):
    sigma = 1e-6
    x, gamma, flags = refine([5.0, 8.0, 11.0, 14.0, 17.0, 20.0], parabola, sigma, runs=8,
                             per_crossing=per_crossing)
    crossings = sign_changes(x, gamma, np.full(x.size, sigma))
    assert len(crossings) == 2
    for c, root in zip(crossings, (A_ROOT, B_ROOT)):
        assert abs(c.value - root) <= c.uncertainty
        assert c.uncertainty <= 2e-3 * root  # far inside the 2 % the ABC check asks for
    # budget: at most `runs` refinement runs per sign change of the listed sweep
    assert sum(flags) <= 2 * 8


def test_refinement_stops_where_noise_hides_the_sign(rng):
    # noise 1e-3 against |gamma| ~ 1e-3 near the roots: refinement stops early and says so
    sigma = 1e-3
    x, gamma, flags = refine([5.0, 8.0, 11.0, 14.0, 17.0, 20.0], parabola, sigma, runs=10, rng=rng)
    crossings = sign_changes(x, gamma, np.full(x.size, sigma))
    assert len(crossings) == 2 and sum(flags) < 2 * 10
    for c in crossings:
        root = A_ROOT if c.direction == "opens" else B_ROOT
        assert abs(c.value - root) <= 2 * c.uncertainty  # honest at 2 sigma


def test_failed_points_are_ignored_and_counted_against_the_budget():
    x = [8.0, 9.0, 11.0]
    gamma = [parabola(8.0), np.nan, parabola(11.0)]  # the run at 9 failed
    (c,) = sign_changes(x, gamma, [1e-6] * 3)
    assert c.bracket == (8.0, 11.0)
    assert refinement_values(x, gamma, [1e-6] * 3, [False, True, False], 1, 1e-3) == []
    assert refinement_values(x, gamma, [1e-6] * 3, [False, True, False], 2, 1e-3) == [9.5]
