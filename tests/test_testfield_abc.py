"""Test-field coefficients of the ABC flow against closed forms and the SOCA literature.

ABC convention (kindyn/flows/beltrami.py)::

    u = (A sin kz + C cos ky,  B sin kx + A cos kz,  C sin ky + B cos kx),    curl u = k u.

Closed-form SOCA for z-dependent test fields (derived here; the numeric SOCA must match to
round-off). Steady SOCA: ``eta Lap b = -curl(u x B_T)`` with the mean of ``u x B_T`` removed.
Write ``u = u_A(z) + u'`` with ``u_A = A (sin kz, cos kz, 0)`` (the xy-mean flow),
``u_B = B (0, sin kx, cos kx)``, ``u_C = C (cos ky, 0, sin ky)`` and ``u' = u_B + u_C``.

* ``u_A x B_T`` for a horizontal ``B_T(z)`` is vertical and depends on z only, so its curl is zero:
  only ``u'`` drives ``b``. Every Fourier mode of ``curl(u' x B_T)`` has horizontal wavenumber k and
  vertical wavenumber +-K, so ``|q|^2 = k^2 + K^2`` and ``b = lam curl(u' x B_T)`` with
  ``lam = 1/(eta (k^2 + K^2))``.
* For ``B_T = e_x c(z)``: ``curl(u' x B_T) = c d_x u' - u'_z c' e_x`` (div u' = 0, div B_T = 0), so
  ``Ebar = <u' x b> = lam [c <u' x d_x u'> - c' <u'_z (u' x e_x)>]``.
  ``<u' x d_x u'> = <u_B x d_x u_B> = B^2 k <(0, s, c) x (0, c, -s)> = -B^2 k e_x``
  (``s = sin kx``, ``c = cos kx``; u_C-u_B cross terms average to zero), and
  ``<u'_z (u' x e_x)> = (0, <u_z^2>, -<u_z u_y>) = (0, (B^2 + C^2)/2, 0)``.
  With ``c = cos Kz`` (``c' = -K sin Kz``) and ``Ebar_i = alpha_ix cos Kz + eta_iy K sin Kz``:
  ``alpha_11 = -B^2 k/(eta (k^2 + K^2))``, ``eta_22 = (B^2 + C^2)/(2 eta (k^2 + K^2))``.
* For ``B_T = e_y c(z)``: ``<u' x d_y u'> = <u_C x d_y u_C> = -C^2 k e_y`` and
  ``<u'_z (u' x e_y)> = (-(B^2 + C^2)/2, 0, <u_z u_x> = 0)``, giving
  ``alpha_22 = -C^2 k/(eta (k^2 + K^2))``, ``eta_11 = (B^2 + C^2)/(2 eta (k^2 + K^2))``.
* All other entries (off-diagonals, the z row) vanish. This agrees with the formulas of issue 4.

Consequence: for A = B = C and K = k, ``|alpha| K - (eta + eta_t) K^2 = B^2/(2 eta) - eta k^2 -
B^2/(2 eta) = -eta k^2`` exactly (``-eta`` for k = 1): the box-scale Beltrami field of the same
handedness is the planar mean of ``B = u``, which only decays because ``curl(u x u) = 0``.

Uniform test fields: all modes of ``b`` have ``|q| = k``; the same algebra gives
``alpha_ij = -delta_ij (B^2, C^2, A^2)_i / (eta k)``, i.e. for A = B = C = 1, k = 1
``alpha = -<u . omega>/(3 eta k^2)`` with ``<u . omega> = k <u^2> = 3`` (Moffatt 1978, Magnetic Field
Generation in Electrically Conducting Fluids, CUP, ch. 7).
"""

from __future__ import annotations

import numpy as np
import pytest

from kindyn.case import load_case
from kindyn.testfield.calibration import calibrate
from kindyn.testfield.closure import mean_field_growth_rate

ABC = """
[domain]
grid = [12, 12, 12]
[flow]
type = "abc"
A = {A}
B = {B}
C = {C}
k = {k}
[magnetic]
eta = {eta}
[testfield]
modes = {modes}
uniform = {uniform}
onset_check = {check}
"""


def run(A=1.0, B=1.0, C=1.0, k=1.0, eta=1.0, modes=(1,), uniform=True, check=False, grid=None):
    text = ABC.format(A=A, B=B, C=C, k=k, eta=eta, modes=list(modes), uniform=str(uniform).lower(),
                      check=str(check).lower())
    overrides = [f"domain.grid={list(grid)}"] if grid else []
    return calibrate(load_case("abc.toml", overrides, text=text))


def off_diagonal(m):
    return m - np.diag(np.diag(m))


def test_uniform_alpha_is_isotropic_and_soca_at_small_Rm():
    """A = B = C = 1, k = 1, Rm = 0.01: alpha_ij = alpha delta_ij (off-diagonals at round-off) and
    alpha/alpha_SOCA = 1 within 1e-3 with alpha_SOCA = -<u.omega>/(3 eta k^2) (Moffatt 1978, ch. 7)."""
    eta = 100.0  # Rm = U/(eta k_f) = 0.01
    r = run(eta=eta, check=True)
    alpha = r.tensors["alpha"]
    assert r.Rm == pytest.approx(0.01)
    assert np.max(np.abs(off_diagonal(alpha))) < 1e-13 * abs(alpha[0, 0])
    np.testing.assert_allclose(np.diag(alpha), alpha[0, 0], rtol=1e-12)
    u_dot_omega, k = 3.0, 1.0  # <u . omega> = k <|u|^2> = k (A^2 + B^2 + C^2)
    alpha_soca = -u_dot_omega / (3 * eta * k ** 2)
    assert abs(alpha[0, 0] / alpha_soca - 1) < 1e-3
    np.testing.assert_allclose(r.tensors["alpha_soca"], alpha_soca * np.eye(3), rtol=1e-12, atol=1e-15 / eta)
    assert r.onset_growth_rates["uniform"] < 0


def test_uniform_alpha_stays_isotropic_at_moderate_Rm():
    """Rm = 5 (below the first dynamo window of this flow): the cubic symmetry of the 1:1:1 ABC flow
    keeps alpha_ij = alpha delta_ij (common practice: it follows from the flow's symmetry group)."""
    r = run(eta=0.2, grid=(16, 16, 16), check=True)
    alpha = r.tensors["alpha"]
    assert np.max(np.abs(off_diagonal(alpha))) < 1e-12 * abs(alpha[0, 0])
    np.testing.assert_allclose(np.diag(alpha), alpha[0, 0], rtol=1e-10)
    assert 0 < alpha[0, 0] / r.tensors["alpha_soca"][0, 0] < 1


def test_departure_from_soca_shrinks_as_Rm_squared():
    """(alpha/alpha_SOCA - 1) at Rm = 0.01, 0.02, 0.04: successive ratios 4 within 1%. The flow is odd
    under a half-period shift, so the Rm^3 term averages out (issue 4)."""
    departures = []
    for Rm in (0.01, 0.02, 0.04):
        r = run(eta=1.0 / Rm)
        departures.append(r.tensors["alpha"][0, 0] / r.tensors["alpha_soca"][0, 0] - 1)
    d = np.array(departures)
    assert np.all(d < 0)
    np.testing.assert_allclose(d[1:] / d[:-1], 4.0, rtol=1e-2)


@pytest.mark.parametrize("A, B, C, k, eta", [(0.7, 1.3, 0.4, 1.0, 0.8), (1.0, 0.5, 2.0, 2.0, 0.3),
                                             (0.0, 1.0, 1.0, 1.0, 1.0)])
def test_soca_closed_form_for_z_dependent_test_fields(A, B, C, k, eta):
    """alpha_11 = -B^2 k/(eta (k^2+K^2)), alpha_22 = -C^2 k/(...), eta_11 = eta_22 = (B^2+C^2)/(2 eta (k^2+K^2)),
    every other entry 0 (derivation in the module docstring); to round-off (atol 1e-13 of the scale)."""
    modes = (1, 2, 3)
    r = run(A, B, C, k, eta, modes=modes, uniform=True)
    for K, alpha, eta_ij in zip(r.K, r.tensors["alpha_K_soca"], r.tensors["eta_K_soca"]):
        denom = eta * (k ** 2 + K ** 2)
        want_alpha = np.array([[-B ** 2 * k / denom, 0.0], [0.0, -C ** 2 * k / denom], [0.0, 0.0]])
        t = (B ** 2 + C ** 2) / (2 * denom)
        want_eta = np.array([[t, 0.0], [0.0, t], [0.0, 0.0]])
        scale = (A ** 2 + B ** 2 + C ** 2) / eta
        np.testing.assert_allclose(alpha, want_alpha, rtol=0, atol=1e-13 * scale)
        np.testing.assert_allclose(eta_ij, want_eta, rtol=0, atol=1e-13 * scale)
    want_uniform = -np.diag([B ** 2, C ** 2, A ** 2]) / (eta * k)
    np.testing.assert_allclose(r.tensors["alpha_soca"], want_uniform, rtol=0, atol=1e-13 * scale)


@pytest.mark.parametrize("k", [1.0, 2.0])
def test_soca_mean_field_growth_rate_at_K_equal_k_is_minus_eta_k2(k):
    """A = B = C, K = k: |alpha| K - (eta + eta_t) K^2 = -eta k^2 exactly (= -eta for k = 1)."""
    eta = 0.37
    r = run(1.0, 1.0, 1.0, k, eta, modes=(int(k),), uniform=False)
    alpha, eta_t = r.horizontal(soca=True)
    p = mean_field_growth_rate(alpha[0], eta_t[0], eta, r.K[0])
    assert p == pytest.approx(-eta * k ** 2, rel=1e-12)
