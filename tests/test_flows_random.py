"""Random helical flows (kindyn.flows.random_helical) and the stochastic growth estimator."""

from __future__ import annotations

import math

import numpy as np
import pytest

from kindyn.box import Box
from kindyn.calculus import curl_hat, divergence_hat
from kindyn.case import load_case
from kindyn.diagnostics.spectra import shell_indices
from kindyn.diagnostics.stochastic_growth import estimate_stochastic_growth, renewal_samples
from kindyn.errors import CaseError
from kindyn.flows import make_flow
from kindyn.flows.base import sample_velocity


def flow(box, **params):
    return make_flow("random-helical", params, box)


def coefficients(u):
    """u = sum u_hat exp(i k.x) (design.md 1), computed independently of the flow with numpy.fft."""
    return np.fft.rfftn(u, axes=(1, 2, 3), norm="forward")


@pytest.mark.parametrize("sigma", [1.0, -1.0])
@pytest.mark.parametrize("grid, lengths, k", [((10, 10, 10), (2 * np.pi,) * 3, 3.0),
                                             ((7, 8, 9), (2 * np.pi, 2 * np.pi, 4 * np.pi), 1.0)])
def test_single_shell_with_sigma_one_is_beltrami(grid, lengths, k, sigma):
    # Helical-wave decomposition: i k x h+- = +-|k| h+- (Waleffe 1992, Phys. Fluids A 4, 350; from
    # memory; the identity is checked by hand from (e1, e2, k/|k|) right-handed). A field made of
    # h+ modes on one sphere |k| = k satisfies curl u = k u (sigma = -1: curl u = -k u).
    box = Box(lengths, grid)
    f = flow(box, k_min=k, k_max=k, sigma=sigma, seed=5, u_rms=1.3)
    u_hat = coefficients(sample_velocity(f, box, 0.0))
    scale = np.abs(u_hat).max()
    np.testing.assert_allclose(curl_hat(u_hat, box), sigma * k * u_hat, rtol=0, atol=1e-13 * k * scale)
    assert np.abs(divergence_hat(u_hat, box)).max() <= 1e-13 * k * scale
    u = sample_velocity(f, box, 0.0)
    assert math.isclose(np.sqrt(np.mean(np.sum(u**2, axis=0))), 1.3, rel_tol=1e-12)
    assert f.speed == 1.3 and math.isclose(f.wavenumber, k, rel_tol=1e-12)


def test_ensemble_reproduces_spectrum_and_sigma():
    # The requested spectrum is the user's input E(k) ~ k^(-5/3) on shells 1..5 and sigma = 0.5.
    # Over S seeds the mean shell energies and helicity fraction must match within 4 standard
    # errors of the sample mean (relative bias from normalising each draw exactly is O(1/modes),
    # ~0.2% here, far below the tolerance). Shell convention: kindyn.diagnostics.spectra.
    box = Box(grid=(16, 16, 16))
    slope, sigma, S = -5.0 / 3.0, 0.5, 120
    shells = shell_indices(box)
    k = np.sqrt(box.k_squared)
    w = box.parseval_weights
    energies, fractions = [], []
    for seed in range(S):
        f = flow(box, spectrum="power-law", k_min=1, k_max=5, slope=slope, sigma=sigma, seed=seed)
        u_hat = coefficients(sample_velocity(f, box, 0.0))
        e_mode = 0.5 * w * np.sum(np.abs(u_hat) ** 2, axis=0)
        h_mode = w * np.sum((np.conj(u_hat) * curl_hat(u_hat, box)).real, axis=0)
        energies.append(np.bincount(shells.ravel(), e_mode.ravel(), minlength=8)[1:6])
        fractions.append(h_mode.sum() / (2 * (k * e_mode).sum()))
    energies = np.array(energies)
    centres = np.arange(1, 6.0)
    requested = centres**slope / np.sum(centres**slope) * 0.5  # u_rms = 1: sum E_s = 1/2
    mean, error = energies.mean(axis=0), energies.std(axis=0, ddof=1) / math.sqrt(S)
    assert np.all(np.abs(mean - requested) <= 4 * error), (mean, requested, error)
    fractions = np.array(fractions)
    assert abs(fractions.mean() - sigma) <= 4 * fractions.std(ddof=1) / math.sqrt(S)


def test_ensemble_reproduces_sigma():
    # Helicity fraction sum H / sum 2kE -> sigma over seeds, within 4 standard errors (~0.008 here);
    # many equally weighted modes (shell spectrum) keep the per-draw spread small.
    box = Box(grid=(16, 16, 16))
    k = np.sqrt(box.k_squared)
    sigma, S, fractions = 0.5, 300, []
    for seed in range(S):
        f = flow(box, spectrum="shell", k_min=2, k_max=5, sigma=sigma, seed=seed)
        u_hat = coefficients(sample_velocity(f, box, 0.0))
        e_mode = 0.5 * box.parseval_weights * np.sum(np.abs(u_hat) ** 2, axis=0)
        h_mode = box.parseval_weights * np.sum((np.conj(u_hat) * curl_hat(u_hat, box)).real, axis=0)
        fractions.append(h_mode.sum() / (2 * (k * e_mode).sum()))
    fractions = np.array(fractions)
    assert abs(fractions.mean() - sigma) <= 4 * fractions.std(ddof=1) / math.sqrt(S)
    assert fractions.std() > 0.01  # a Gaussian ensemble: the helicity does fluctuate


def test_shell_spectrum_gives_every_mode_the_same_expected_energy():
    # spectrum = "shell": random waves with equal expected energy per mode (common practice), so
    # the expected shell energy is proportional to the number of modes in the shell.
    box = Box(grid=(12, 12, 12))
    shells = shell_indices(box)
    S, energies = 100, []
    for seed in range(S):
        f = flow(box, spectrum="shell", k_min=1.0, k_max=3.0, sigma=0.0, seed=seed)
        u_hat = coefficients(sample_velocity(f, box, 0.0))
        e_mode = 0.5 * box.parseval_weights * np.sum(np.abs(u_hat) ** 2, axis=0)
        energies.append(np.bincount(shells.ravel(), e_mode.ravel(), minlength=5)[1:4])
    energies = np.array(energies)
    counts = np.array([len(f.modes[np.rint(np.linalg.norm(f.modes, axis=1)) == s]) for s in (1, 2, 3)])
    requested = 0.5 * counts / counts.sum()
    error = energies.std(axis=0, ddof=1) / math.sqrt(S)
    assert np.all(np.abs(energies.mean(axis=0) - requested) <= 4 * error)


def test_tabulated_spectrum_puts_no_energy_outside_the_table():
    box = Box(grid=(16, 16, 16))
    f = flow(box, spectrum="table", table_k=[2.0, 3.0, 4.0], table_E=[1.0, 0.5, 0.0], seed=2)
    u_hat = coefficients(sample_velocity(f, box, 0.0))
    e_mode = np.sum(np.abs(u_hat) ** 2, axis=0)
    shells = shell_indices(box)
    outside = (shells < 2) | (shells > 3)   # E(4) = 0 in the table
    assert e_mode[outside].sum() <= 1e-28 * e_mode.sum()


@pytest.mark.parametrize("time_dependence, tau", [("steady", None), ("renovating", 0.7),
                                                  ("ornstein-uhlenbeck", 0.7)])
def test_same_seed_is_bit_identical_and_different_seeds_differ(time_dependence, tau):
    box = Box(grid=(9, 10, 8))
    params = dict(k_min=1.0, k_max=2.0, sigma=0.3, time_dependence=time_dependence)
    if tau:
        params["tau"] = tau
    a = [sample_velocity(flow(box, seed=11, **params), box, t) for t in (0.0, 3.3)]
    b = [sample_velocity(flow(box, seed=11, **params), box, t) for t in (0.0, 3.3)]
    c = sample_velocity(flow(box, seed=12, **params), box, 0.0)
    for x, y in zip(a, b):
        assert np.array_equal(x, y)
    assert np.abs(a[0] - c).max() > 0.1


def test_same_seed_gives_the_same_flow_on_any_grid():
    # The draw depends on the band and box only, so a grid refinement study keeps the realisation.
    coarse, fine = Box(grid=(8, 8, 8)), Box(grid=(16, 16, 16))
    u8 = sample_velocity(flow(coarse, k_min=1, k_max=2, seed=7, sigma=0.2), coarse, 0.0)
    u16 = sample_velocity(flow(fine, k_min=1, k_max=2, seed=7, sigma=0.2), fine, 0.0)
    np.testing.assert_allclose(u16[:, ::2, ::2, ::2], u8, rtol=0, atol=1e-14)


def test_off_grid_points_match_the_grid_evaluation():
    box = Box(grid=(10, 10, 10))
    f = flow(box, k_min=1, k_max=3, seed=3, sigma=0.5, time_dependence="ornstein-uhlenbeck", tau=0.4)
    u = sample_velocity(f, box, 1.234)
    i, j, k = np.array([0, 3, 9]), np.array([1, 5, 2]), np.array([7, 0, 4])
    points = [box.axis(0)[i], box.axis(1)[j], box.axis(2)[k]]   # 1-D point lists: mode sum
    np.testing.assert_allclose(np.array(f.velocity(*points, 1.234)), u[:, i, j, k], rtol=0, atol=1e-13)


def test_ornstein_uhlenbeck_values_do_not_depend_on_call_order():
    box = Box(grid=(8, 8, 8))
    params = dict(k_min=1, k_max=2, seed=4, time_dependence="ornstein-uhlenbeck", tau=0.3)
    times = [5.37, 0.0, 41.0, 0.013, 5.37 + 1e-9]
    forward = flow(box, **params)
    first = {t: sample_velocity(forward, box, t) for t in times}
    backward = flow(box, **params)
    for t in reversed(times):
        assert np.array_equal(sample_velocity(backward, box, t), first[t])
    # continuous in time (linear interpolation of an OU path): a tiny step changes u a little
    assert np.abs(first[5.37 + 1e-9] - first[5.37]).max() < 1e-6


def test_ornstein_uhlenbeck_correlation_is_exponential():
    # OU process: <a(t) a*(t+s)> / <|a|^2> = exp(-|s|/tau) (Uhlenbeck & Ornstein 1930, Phys. Rev. 36,
    # 823). Averaged over ~340 modes and 240 correlation times; sampling error ~ 0.01.
    box = Box(grid=(16, 16, 16))
    tau = 0.5
    f = flow(box, k_min=1, k_max=5, seed=9, time_dependence="ornstein-uhlenbeck", tau=tau)
    times = np.arange(0, 120.0, tau / 4)
    c = np.array([f.coefficients(t) for t in times])         # (T, M, 3)
    norm = np.mean(np.sum(np.abs(c) ** 2, axis=(1, 2)))
    for lag, s in ((4, tau), (8, 2 * tau)):
        corr = np.mean(np.sum((c[:-lag] * np.conj(c[lag:])).real, axis=(1, 2))) / norm
        assert abs(corr - math.exp(-s / tau)) < 0.05, (s, corr)


def test_renovating_flow_is_constant_between_renewals_and_new_after():
    box = Box(grid=(8, 8, 8))
    f = flow(box, k_min=1, k_max=2, seed=1, time_dependence="renovating", tau=0.1)
    u = {t: sample_velocity(f, box, t) for t in (0.2, 0.25, 0.3 - 1e-6, 0.1 * 3, 0.35)}
    assert np.array_equal(u[0.2], u[0.25]) and np.array_equal(u[0.2], u[0.3 - 1e-6])
    # 0.1 * 3 = 0.30000000000000004 in floating point: the renewal at t = 0.3 is still selected
    assert np.array_equal(u[0.1 * 3], u[0.35]) and np.abs(u[0.35] - u[0.2]).max() > 0.1
    assert f.renewal_time == 0.1 and f.stochastic and not f.steady


def test_random_shift_translates_the_first_draw():
    box = Box(grid=(8, 8, 8))
    f = flow(box, k_min=1, k_max=2, seed=1, time_dependence="renovating", tau=1.0, renewal="shift")
    c0, c1 = f.coefficients(0.5), f.coefficients(1.5)
    # a translation multiplies every coefficient by a unit phase
    np.testing.assert_allclose(np.abs(c1), np.abs(c0), rtol=1e-12)
    assert np.abs(c1 - c0).max() > 1e-3


@pytest.mark.parametrize("params, key", [
    (dict(sigma=1.5), "flow.sigma"),
    (dict(k_min=1.2, k_max=1.3), "flow.k_max"),
    (dict(time_dependence="renovating"), "flow.tau"),
    (dict(spectrum="gaussian"), "flow.spectrum"),
    (dict(k_min=1, k_max=4), "domain.grid"),
    (dict(seed=-1), "flow.seed"),
    (dict(colour="red"), "flow.colour"),
])
def test_bad_parameters_name_the_key(tmp_path, params, key):
    lines = ["[domain]", "grid = [8, 8, 8]", "[flow]", 'type = "random-helical"']
    lines += [f"{k} = {v!r}".replace("'", '"') for k, v in params.items()]
    lines += ["[magnetic]", "eta = 0.1"]
    path = tmp_path / "case.toml"
    path.write_text("\n".join(lines))
    with pytest.raises(CaseError) as info:
        load_case(path)
    assert key in str(info.value)


# --- the stochastic growth estimator -------------------------------------------------------------

def synthetic_record(rng, gamma, n, dt, phi, noise):
    """ln E with AR(1) increments d_j = 2 gamma dt + x_j, x_j = phi x_{j-1} + noise eps_j."""
    x = np.empty(n - 1)
    x[0] = noise * rng.standard_normal() / math.sqrt(1 - phi**2)
    for j in range(1, n - 1):
        x[j] = phi * x[j - 1] + noise * rng.standard_normal()
    y = np.concatenate([[0.0], np.cumsum(2 * gamma * dt + x)])
    return np.arange(n) * dt, y


def test_block_error_matches_the_true_sampling_spread():
    # For AR(1) increments the variance of the mean of n increments is noise^2/((1-phi)^2 n) for
    # large n (long-run variance; Flyvbjerg & Petersen 1989, J. Chem. Phys. 91, 461). The
    # estimator must recover gamma and report an error of the right size.
    rng = np.random.default_rng(2024)
    gamma, dt, phi, noise, n = 0.3, 0.25, 0.6, 0.2, 1601
    rates, errors = [], []
    for _ in range(60):
        t, y = synthetic_record(rng, gamma, n, dt, phi, noise)
        e = estimate_stochastic_growth(t, y, tolerance=1.0, correlation_time=dt * 2)
        rates.append(e.growth_rate)
        errors.append(e.error)
    window = (n - n // 2) - 1
    exact = noise / (1 - phi) / math.sqrt(window) / (2 * dt)
    assert abs(np.mean(rates) - gamma) < 4 * exact / math.sqrt(60)
    assert 0.7 * exact < np.std(rates, ddof=1) < 1.4 * exact      # Monte Carlo check of the formula
    assert 0.7 * exact < np.median(errors) < 1.6 * exact           # block errors (max over sizes)


def test_estimator_uses_renewal_times_and_reports_convergence():
    rng = np.random.default_rng(7)
    tau, per = 0.5, 8
    t_renew, y_renew = synthetic_record(rng, -0.1, 201, tau, 0.0, 0.05)
    t = np.arange(200 * per + 1) * (tau / per)
    y = np.interp(t, t_renew, y_renew) + 5.0 * np.sin(2 * np.pi * t / tau) ** 2  # wild within renewals
    assert np.array_equal(renewal_samples(t, tau), np.arange(0, t.size, per))
    e = estimate_stochastic_growth(t, y, tolerance=0.05, renewal_time=tau)
    assert e.converged and abs(e.growth_rate + 0.1) < 4 * e.error
    short = estimate_stochastic_growth(t[:80], y[:80], tolerance=0.05, renewal_time=tau)
    assert not short.converged and "too few" in short.note

