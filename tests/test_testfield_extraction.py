"""Test-field extraction, kernels, mean-field dispersion and the [testfield] case keys.

References outside the code under test:
* manufactured EMFs built from known tensors with the conventions of design.md section 1
  (``Ebar_i = alpha_ij Bbar_j - eta_ij (curl Bbar)_j``): the extraction must return the tensors to
  round-off (exact linear algebra);
* the planar beta: ``beta_ijs d_s Bbar_j = -eta_il (curl Bbar)_l`` checked pointwise on sampled fields;
* the mean-field dispersion relation ``p = |alpha| K - (eta + eta_t) K^2`` (design.md section 1),
  checked against a direct eigen-solve of the 2 x 2 mean-field problem written independently here.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from kindyn.box import Box
from kindyn.case import load_case
from kindyn.errors import CaseError
from kindyn.testfield.closure import anisotropic_growth_rate, mean_field_growth_rate
from kindyn.testfield.extraction import (alpha_from_uniform, beta_from_eta, coefficients_from_profiles,
                                         horizontal_parts, manufactured_emf)
from kindyn.layout import BoxLayout
from kindyn.testfield.fields import mean_mode_mask, mean_profile, sinusoidal_test_fields
from kindyn.testfield.kernels import fit_lorentzian
from kindyn.testfield.settings import plan_from_case


@pytest.mark.parametrize("axis", [0, 1, 2])
@pytest.mark.parametrize("n, mode", [(9, 1), (12, 3), (16, 2)])
def test_manufactured_emf_recovered_exactly(rng, axis, n, mode):
    """Known 3 x 2 alpha and eta tensors -> EMF profiles -> extraction returns them (atol 1e-13)."""
    length = 2 * np.pi * 1.5
    K = 2 * np.pi * mode / length
    s = np.arange(n) * length / n
    fields = sinusoidal_test_fields(axis, mode, K)
    alpha, eta = rng.standard_normal((3, 2)), rng.standard_normal((3, 2))
    emf = manufactured_emf(alpha, eta, fields, s)
    got_alpha, got_eta = coefficients_from_profiles(emf, fields, s)
    np.testing.assert_allclose(got_alpha, alpha, rtol=0, atol=1e-13)
    np.testing.assert_allclose(got_eta, eta, rtol=0, atol=1e-13)


def test_manufactured_emf_with_position_dependent_tensors_gives_their_average(rng):
    """Tensors times (1 + 0.3 cos(3 K s)): the extraction returns the s-average (the harmonic at 3K is
    orthogonal to the products of the test-field profiles at K), exactly."""
    n, K = 16, 1.0
    s = np.arange(n) * 2 * np.pi / n
    fields = sinusoidal_test_fields(2, 1, K)
    alpha, eta = rng.standard_normal((3, 2)), rng.standard_normal((3, 2))
    emf = manufactured_emf(alpha, eta, fields, s, alpha_profile=lambda x: 1 + 0.3 * np.cos(3 * x),
                           eta_profile=lambda x: 1 - 0.2 * np.sin(3 * x))
    got_alpha, got_eta = coefficients_from_profiles(emf, fields, s)
    np.testing.assert_allclose(got_alpha, alpha, atol=1e-13)
    np.testing.assert_allclose(got_eta, eta, atol=1e-13)


def test_uniform_extraction_is_column_per_test_field(rng):
    alpha = rng.standard_normal((3, 3))
    emf = np.stack([alpha @ np.eye(3)[j] for j in range(3)])  # Ebar for B = e_j
    np.testing.assert_array_equal(alpha_from_uniform(emf), alpha)


@pytest.mark.parametrize("axis", [0, 1, 2])
def test_planar_beta_matches_minus_eta_curl(rng, axis):
    """beta_ijs d_s B_j == -eta_il (curl B)_l for a random mean field B(s) with B_s = 0."""
    eta = rng.standard_normal((3, 2))
    beta = beta_from_eta(eta, axis)
    perp = [j for j in range(3) if j != axis]
    dB = np.zeros(3)
    dB[perp] = rng.standard_normal(2)  # d_s B (in-plane)
    curl = np.cross(np.eye(3)[axis], dB)  # curl B = e_s x d_s B
    np.testing.assert_allclose(beta @ dB[perp], -(eta @ curl[perp]), atol=1e-14)


def test_mean_profile_and_mask_on_a_known_field():
    """Planar mean of f = cos(x) cos(2z) + 3 sin(z) + 0.5 over xy-planes is 3 sin z + 0.5 (exact)."""
    box = Box(grid=(10, 8, 12))
    layout = BoxLayout(box)
    x, y, z = box.coordinates
    f = np.cos(x) * np.cos(2 * z) + 3 * np.sin(z) + 0.5 + 0 * y
    f_hat = np.fft.rfftn(f, norm="forward")
    np.testing.assert_allclose(mean_profile(f_hat, layout, 2), 3 * np.sin(box.axis(2)) + 0.5, atol=1e-13)
    np.testing.assert_allclose(mean_profile(f_hat, layout, None), 0.5, atol=1e-14)
    g = np.cos(3 * x) + np.cos(x) * np.cos(y) + 0 * z
    np.testing.assert_allclose(mean_profile(np.fft.rfftn(g, norm="forward"), layout, 0),
                               np.cos(3 * box.axis(0)), atol=1e-13)
    assert mean_mode_mask(layout, None).sum() == 1
    assert mean_mode_mask(layout, 2).sum() == box.spectral_shape[2]


def test_lorentzian_fit_recovers_parameters():
    """c0 / (1 + (K/kc)^2) sampled at 3 K: the two-parameter fit returns c0 and kc (rtol 1e-10)."""
    K = np.array([1.0, 2.0, 3.0])
    fit = fit_lorentzian(K, -0.7 / (1 + (K / 1.8) ** 2), k_f=1.0)
    assert not fit.kc_fixed
    assert fit.c0 == pytest.approx(-0.7, rel=1e-10)
    assert fit.kc == pytest.approx(1.8, rel=1e-10)
    single = fit_lorentzian(K[:1], [-0.35], k_f=1.0)
    assert single.kc_fixed and single.kc == 1.0 and single.c0 == pytest.approx(-0.7, rel=1e-14)


def _two_by_two_rates(alpha, eta_t, eta, K):
    """Independent: Bbar = (bx, by) e^{iKz}, curl -> iK e_z x, E = alpha B - eta_t curl B."""
    J = np.array([[0.0, -1.0], [1.0, 0.0]])  # e_z x (bx, by) = (-by, bx)
    curl = 1j * K * J
    M = curl @ (alpha * np.eye(2) - eta_t * curl) - eta * K ** 2 * np.eye(2)
    return np.linalg.eigvals(M)


@pytest.mark.parametrize("alpha, eta_t", [(-0.8, 0.3), (0.5, 0.1), (-0.2, 0.6)])
def test_mean_field_growth_rate_formula(alpha, eta_t):
    eta, K = 0.25, 1.5
    expected = max(_two_by_two_rates(alpha, eta_t, eta, K).real)
    assert mean_field_growth_rate(alpha, eta_t, eta, K) == pytest.approx(expected, rel=1e-13)
    a3 = np.zeros((3, 2))
    e3 = np.zeros((3, 2))
    a3[0, 0] = a3[1, 1] = alpha
    e3[0, 0] = e3[1, 1] = eta_t
    assert anisotropic_growth_rate(a3, e3, eta, K, 2).real == pytest.approx(expected, rel=1e-13)
    assert horizontal_parts(a3, e3, 2) == (alpha, eta_t)


CASE = """
[domain]
grid = [12, 12, 12]
[flow]
type = "abc"
[magnetic]
Rm = 1.0
"""


@pytest.mark.parametrize("override, key", [
    (["testfield.modes=[4]"], "testfield.modes"),                       # 12 points keep |m| <= 3
    (["testfield.modes=[1]", "testfield.wavenumbers=[1.0]"], "testfield.wavenumbers"),
    (["testfield.wavenumbers=[1.5]"], "testfield.wavenumbers"),         # not a multiple of 2 pi / L
    (["testfield.modes=[1, 1]"], "testfield.modes"),
    (["testfield.reset_interval=5.0"], "testfield.reset_interval"),     # direct solve has no resets
])
def test_bad_testfield_settings_name_the_key(override, key):
    case = load_case("bad.toml", override, text=CASE)
    with pytest.raises(CaseError) as info:
        plan_from_case(case)
    assert info.value.key == key and "bad.toml" in str(info.value)


@pytest.mark.parametrize("override", ["testfield.axis=\"w\"", "testfield.modes=[0]", "testfield.tolerance=-1",
                                      "testfield.typo=1", "testfield.uniform=3"])
def test_bad_testfield_types_fail_at_load(override):
    with pytest.raises(CaseError) as info:
        load_case("bad.toml", [override], text=CASE)
    assert info.value.key.startswith("testfield.")


def test_direct_method_refused_for_time_dependent_flow():
    text = CASE.replace('type = "abc"', 'type = "galloway-proctor"')
    case = load_case("gp.toml", ["testfield.method=direct"], text=text)
    with pytest.raises(CaseError) as info:
        plan_from_case(case)
    assert info.value.key == "testfield.method"


def test_plan_resolves_wavenumbers_to_modes():
    case = load_case("ok.toml", ["domain.lengths=[\"2*pi\", \"2*pi\", \"4*pi\"]", "testfield.wavenumbers=[1.0, 0.5]"],
                     text=CASE)
    plan = plan_from_case(case)
    assert plan.modes == (1, 2) and plan.wavenumbers == pytest.approx((0.5, 1.0))
    assert plan.method == "direct" and plan.perpendicular == (0, 1) and math.isclose(plan.wavenumbers[1], 1.0)
