"""Self-test of the independent dense Galerkin reference ``tests/reference/roberts_galerkin.py``.

Every check pairs the reference with something outside it: an exact solution, a
physical-space (FFT) evaluation of ``curl(u x B)``, an exact symmetry, the SOCA
alpha effect of the Roberts flow (Moffatt 1978; Roberts 1972), or an exact change
of frame. Runtime target: well below 20 s.

Recommended truncation for the Roberts "sum" flow (U = 1, k = 1): M = 12 for
eta >= 0.1 (leading eigenvalue within ~3e-11 of M = 16), M = 16 for a safety margin,
and M >= 20 for eta = 0.05 (M = 16 there is good to ~1e-8 only).
"""

from __future__ import annotations

import functools

import numpy as np
import pytest

try:  # `python -m pytest` from the repository root puts the root on sys.path
    from tests.reference import roberts_galerkin as rg
except ImportError:  # plain `pytest` with rootdir-relative imports
    from reference import roberts_galerkin as rg


K = 1.0
ROBERTS = rg.roberts_velocity_coefficients(1.0, "sum")
CENTRE = rg.roberts_rotation_centre(K, "sum")


@functools.lru_cache(maxsize=None)
def roberts_eigs(eta: float, kz: float, M: int) -> np.ndarray:
    """All solenoidal, zero-mean eigenvalues of the Roberts "sum" flow (cached; C4-reduced)."""
    return rg.leading_eigenvalues(ROBERTS, K, kz, eta, M, count=None, c4_centre=CENTRE)


def assert_same_multiset(a, b, atol, rtol=0.0):
    """Every element of ``a`` has a partner in ``b`` and vice versa (same length)."""
    a, b = np.asarray(a), np.asarray(b)
    assert a.shape == b.shape
    d = np.abs(a[:, None] - b[None, :])
    tol = atol + rtol * np.abs(b)[None, :]
    assert np.all(np.min(d - tol, axis=1) <= 0.0), np.max(np.min(d, axis=1))
    assert np.all(np.min(d - tol, axis=0) <= 0.0), np.max(np.min(d, axis=0))


def random_real_flow(rng, max_mode=2):
    """Random real trigonometric-polynomial velocity (no spatial symmetry)."""
    coeffs = {}
    for m in range(-max_mode, max_mode + 1):
        for n in range(-max_mode, max_mode + 1):
            if (m, n) in coeffs:
                continue
            v = rng.normal(size=3) + 1j * rng.normal(size=3)
            if (m, n) == (0, 0):
                v = v.real.astype(complex)
            coeffs[(m, n)] = v
            coeffs[(-m, -n)] = np.conj(v)
    return coeffs


# ----------------------------------------------------------------- flow coefficients
@pytest.mark.parametrize(
    "coeffs, formula",
    [
        (ROBERTS, lambda x, y: (np.cos(y), np.sin(x), np.cos(x) + np.sin(y))),
        (
            rg.roberts_velocity_coefficients(1.3, "product"),
            lambda x, y: 1.3
            * np.array([np.sin(x) * np.cos(y), -np.cos(x) * np.sin(y), np.sqrt(2) * np.sin(x) * np.sin(y)]),
        ),
        (
            rg.galloway_proctor_velocity_coefficients(0.7, U=0.9, epsilon=1.1, omega=1.7),
            lambda x, y: np.sqrt(1.5)
            * 0.9
            * np.array(
                [
                    np.cos(y + 1.1 * np.sin(1.7 * 0.7)),
                    np.sin(x + 1.1 * np.cos(1.7 * 0.7)),
                    np.cos(x + 1.1 * np.cos(1.7 * 0.7)) + np.sin(y + 1.1 * np.sin(1.7 * 0.7)),
                ]
            ),
        ),
        (
            rg.galloway_proctor_velocity_coefficients(0.7, epsilon=1.1, polarisation="linear"),
            lambda x, y: np.sqrt(1.5)
            * np.array(
                [
                    np.cos(y + 1.1 * np.cos(0.7)),
                    np.sin(x + 1.1 * np.cos(0.7)),
                    np.cos(x + 1.1 * np.cos(0.7)) + np.sin(y + 1.1 * np.cos(0.7)),
                ]
            ),
        ),
    ],
    ids=["roberts-sum", "roberts-product", "gp-circular", "gp-linear"],
)
def test_velocity_coefficients_match_formulas(coeffs, formula):
    rng = np.random.default_rng(0)
    x, y = rng.uniform(0, 2 * np.pi, size=(2, 50))
    u = rg.velocity_from_coefficients(coeffs, K, x, y)
    np.testing.assert_allclose(u.imag, 0.0, atol=1e-14)
    np.testing.assert_allclose(u.real, np.array(formula(x, y)), rtol=0, atol=1e-13)


def test_roberts_sum_flow_is_beltrami():
    # curl u = k u for every mode of the "sum" flow: i q x u_q = k u_q
    for (m, n), v in ROBERTS.items():
        q = K * np.array([m, n, 0.0])
        np.testing.assert_allclose(1j * np.cross(q, v), K * v, atol=1e-15)


# ------------------------------------------------------------------------- operator
def test_matrix_matches_physical_space_evaluation():
    """L b equals curl(u x B) + eta Lap B computed pointwise on an alias-free grid."""
    rng = np.random.default_rng(1)
    M, k, kz, eta = 3, 1.7, 0.45, 0.13
    u_hat = random_real_flow(rng, max_mode=2)
    N = (2 * M + 1) ** 2
    b = (rng.normal(size=(N, 3)) + 1j * rng.normal(size=(N, 3))).ravel()

    G = 16  # > 2*(M + 2) + 1 modes, so the product u*B is resolved exactly
    xs = np.arange(G) * (2 * np.pi / k) / G
    x, y = np.meshgrid(xs, xs, indexing="ij")
    r = np.arange(-M, M + 1)
    B = np.zeros((3, G, G), complex)
    for j, (m, n) in enumerate((m, n) for m in r for n in r):
        B += b[3 * j : 3 * j + 3, None, None] * np.exp(1j * k * (m * x + n * y))
    u = rg.velocity_from_coefficients(u_hat, k, x, y).real
    uxB_hat = np.fft.fft2(np.cross(u, B, axis=0), axes=(1, 2)) / G**2  # index (m mod G, n mod G)

    q = rg.mode_wavevectors(k, kz, M)
    mm, nn = np.rint(q[:, 0] / k).astype(int), np.rint(q[:, 1] / k).astype(int)
    E = uxB_hat[:, mm % G, nn % G].T  # (N, 3)
    expected = 1j * np.cross(q, E) - eta * np.sum(q * q, axis=1)[:, None] * b.reshape(N, 3)

    L = rg.induction_matrix(u_hat, k, kz, eta, M)
    np.testing.assert_allclose(L @ b, expected.ravel(), rtol=0, atol=1e-12 * np.abs(expected).max())


def test_solenoidal_basis_and_invariance():
    rng = np.random.default_rng(2)
    M, kz = 3, 0.0
    for keep_mean, expected_cols in ((False, 2 * 48), (True, 2 * 48 + 3)):
        P = rg.solenoidal_basis(K, kz, M, keep_mean).toarray()
        assert P.shape == (3 * 49, expected_cols)
        np.testing.assert_allclose(P.T @ P, np.eye(expected_cols), atol=1e-14)
        q = rg.mode_wavevectors(K, kz, M)
        np.testing.assert_allclose(np.einsum("jc,jca->a", q, P.reshape(49, 3, -1)), 0, atol=1e-14)
    # L maps everything into solenoidal fields (curl) up to the diagonal diffusion
    L = rg.induction_matrix(random_real_flow(rng), K, 0.3, 0.0, M)
    P = rg.solenoidal_basis(K, 0.3, M).toarray()
    np.testing.assert_allclose(P @ (P.T @ L), L, atol=1e-12)


# ------------------------------------------------------------------ exact spectra
@pytest.mark.parametrize("kz, keep_mean", [(0.4, False), (0.0, False), (0.0, True)])
def test_no_flow_gives_pure_diffusion(kz, keep_mean):
    M, eta = 4, 0.3
    ev = rg.leading_eigenvalues({}, K, kz, eta, M, count=None, keep_mean=keep_mean)
    q2 = np.sum(rg.mode_wavevectors(K, kz, M) ** 2, axis=1)
    if not keep_mean:
        q2 = q2[q2 > 0]
    expected = -eta * np.concatenate([q2, q2] + ([np.zeros(1)] if keep_mean and kz == 0 else []))
    np.testing.assert_allclose(np.sort(ev.real), np.sort(expected), rtol=0, atol=1e-13)
    np.testing.assert_allclose(ev.imag, 0.0, atol=1e-13)


def test_uniform_flow_gives_advected_diffusion():
    M, k, kz, eta = 4, 1.3, 0.6, 0.07
    U0 = np.array([0.3, -1.1, 0.8])
    ev = rg.leading_eigenvalues({(0, 0): U0.astype(complex)}, k, kz, eta, M, count=None)
    q = rg.mode_wavevectors(k, kz, M)
    p = -1j * (q @ U0) - eta * np.sum(q * q, axis=1)
    assert_same_multiset(ev, np.concatenate([p, p]), atol=1e-12)
    # the Cartesian matrix also carries the spurious longitudinal modes -eta|q|^2
    full = np.linalg.eigvals(rg.induction_matrix({(0, 0): U0.astype(complex)}, k, kz, eta, M))
    assert_same_multiset(full, np.concatenate([p, p, -eta * np.sum(q * q, axis=1)]), atol=1e-11)


# ---------------------------------------------------------- Roberts flow: numerics
@pytest.mark.parametrize("form", ["sum", "product"])
def test_c4_reduction_reproduces_full_spectrum(form):
    """The optional block reduction by the 90-degree rotation symmetry gives exactly the
    eigenvalues of the unreduced dense problem."""
    u = rg.roberts_velocity_coefficients(0.8, form)
    k, kz, eta, M = 1.4, 0.45, 0.12, 6
    centre = rg.roberts_rotation_centre(k, form)
    full = rg.leading_eigenvalues(u, k, kz, eta, M, count=None)
    reduced = rg.leading_eigenvalues(u, k, kz, eta, M, count=None, c4_centre=centre)
    assert_same_multiset(reduced, full, atol=1e-11)
    with pytest.raises(ValueError, match="not invariant"):
        rg.leading_eigenvalues(rg.galloway_proctor_velocity_coefficients(0.3), k, kz, eta, 2, c4_centre=centre)


@pytest.mark.parametrize("eta, kz", [(0.2, 0.5), (0.1, 0.3)])
def test_convergence_in_truncation(eta, kz):
    """Leading eigenvalue changes by < 1e-10 from M = 12 to M = 16 (observed: 1.2e-13
    and 2.8e-11)."""
    p12 = roberts_eigs(eta, kz, 12)[0]
    p16 = roberts_eigs(eta, kz, 16)[0]
    assert abs(p16 - p12) < 1e-10
    assert abs(p16.imag) < 1e-12  # the leading Roberts mode is non-oscillatory


def test_roberts_flow_is_a_dynamo():
    """Roberts (1972): the helical cellular flow amplifies fields of long vertical scale.

    At eta = 0.1 (Rm = 10): gamma(kz=0.3) = 0.0746129, gamma(kz=0.7) = 0.1547001 (> 0);
    gamma < 0 for kz >= 1.5 (diffusion wins); gamma -> 0+ like |alpha| kz as kz -> 0
    (it is *not* negative there); and at kz = 0 exactly every zero-mean mode decays
    (Zeldovich's antidynamo theorem for planar fields and flows), with leading
    eigenvalue -eta k^2 = -0.1.
    """
    eta, M = 0.1, 10
    gamma = {
        kz: rg.leading_eigenvalues(ROBERTS, K, kz, eta, M, count=1, c4_centre=CENTRE)[0].real
        for kz in (0.0, 0.01, 0.3, 0.7, 2.0)
    }
    assert gamma[0.3] == pytest.approx(0.0746129, abs=1e-6)
    assert gamma[0.7] == pytest.approx(0.1547001, abs=1e-6)
    assert gamma[2.0] < -0.2
    assert 0.0 < gamma[0.01] < 0.3 * 0.01 * (1 / eta)  # below SOCA |alpha| kz = kz/eta
    assert gamma[0.0] == pytest.approx(-eta * K**2, abs=1e-10)


@pytest.mark.parametrize("eta", [5.0, 10.0])
def test_small_kz_growth_matches_soca_alpha(eta):
    """SOCA for the Roberts flow (U = k = 1): for uniform horizontal B0 the steady
    fluctuation is b = (B0.grad)u / eta, and <u x (d_x u)> = (-1, 0, 0), so
    alpha_xx = alpha_yy = -U^2/(eta k), alpha_zz = 0. The mean-field mode
    B = (Bx, By, 0) exp(i kz z) then grows at p = |alpha| kz - eta kz^2 (eta_t is
    negligible at this kz). SOCA is exact to O(Rm^2) = O(1/eta^2)."""
    kz = 1e-3
    p = rg.leading_eigenvalues(ROBERTS, K, kz, eta, 5, count=1)[0]
    soca = kz / eta - eta * kz**2
    assert abs(p.imag) < 1e-12
    assert abs(p.real / soca - 1.0) < 1.0 / eta**2


# -------------------------------------------------------------------- symmetries
def test_kz_reversal_is_complex_conjugation():
    """Real u: conj(B) solves the problem whenever B does, so
    spectrum(-kz) = conj(spectrum(kz)). For a generic flow spectrum(kz) is *not*
    closed under conjugation, so the relation is not trivially satisfied."""
    rng = np.random.default_rng(3)
    u = random_real_flow(rng, max_mode=1)
    M, kz, eta = 4, 0.7, 0.5
    plus = rg.leading_eigenvalues(u, K, kz, eta, M, count=None)
    minus = rg.leading_eigenvalues(u, K, -kz, eta, M, count=None)
    assert_same_multiset(minus, np.conj(plus), atol=1e-9)
    d = np.abs(plus[:, None] - np.conj(plus)[None, :]).min(axis=1)
    assert d.max() > 1e-2


def test_roberts_spectrum_is_even_in_kz():
    """The Roberts "sum" flow is invariant under the rotation by pi about (1, 1, 0)
    combined with the shift (x, y) -> (x + pi/2, y - pi/2); that rotation maps kz to
    -kz, so spectrum(kz) = spectrum(-kz) = conj(spectrum(kz)) (closed under conjugation)."""
    ev = rg.leading_eigenvalues(ROBERTS, K, 0.5, 0.2, 8, count=None)
    minus = rg.leading_eigenvalues(ROBERTS, K, -0.5, 0.2, 8, count=None)
    assert_same_multiset(minus, ev, atol=1e-9)
    assert_same_multiset(np.conj(ev), ev, atol=1e-9)


# ------------------------------------------------------------------------ Floquet
def test_floquet_steady_flow_matches_eigenvalues():
    M, kz, eta, T = 4, 0.5, 0.3, 2.0
    ev = rg.leading_eigenvalues(ROBERTS, K, kz, eta, M, count=None)
    mu = rg.floquet_multipliers(lambda t: ROBERTS, K, kz, eta, M, T, steps=2)
    assert_same_multiset(mu, np.exp(ev * T), atol=1e-11)


def test_floquet_time_dependent_uniform_flow_is_exact():
    """U0(t) = (0.5 + cos t, sin t, 0.2): b_q(T) = exp(-i q . int U0 dt - eta |q|^2 T) b_q(0)."""
    M, k, kz, eta, T = 3, 1.0, 0.8, 0.05, 2 * np.pi

    def U0(t):
        return {(0, 0): np.array([0.5 + np.cos(t), np.sin(t), 0.2], dtype=complex)}

    q = rg.mode_wavevectors(k, kz, M)
    mu_exact = np.exp(-1j * q @ np.array([0.5 * T, 0.0, 0.2 * T]) - eta * np.sum(q * q, axis=1) * T)
    mu = rg.floquet_multipliers(U0, k, kz, eta, M, T, steps=24)
    assert_same_multiset(mu, np.concatenate([mu_exact, mu_exact]), atol=1e-9)


def test_floquet_galloway_proctor_frame_change_and_order():
    """The GP flow is the steady sqrt(3/2) Roberts flow seen from a frame moving with
    s(t) = (a(t), b(t))/k: in X = x + s(t) the field obeys the same equation with
    u = u_R(X) + ds/dt (a uniform, time-dependent velocity). The frames coincide
    modulo a fixed shift at t = 0 and T, so the multipliers agree. Also checks the
    fourth-order convergence of the Magnus integrator and mu(-kz) = conj(mu(kz))."""
    M, kz, eta, T = 3, 0.57, 0.2, 2 * np.pi
    lab = rg.galloway_proctor_velocity_coefficients  # U = eps = omega = 1, circular
    roberts = rg.galloway_proctor_velocity_coefficients(0.0, epsilon=0.0)

    def moving(t):
        c = {key: v.copy() for key, v in roberts.items()}
        c[(0, 0)] = np.array([-np.sin(t), np.cos(t), 0.0], dtype=complex) / K  # (da/dt, db/dt)/k
        return c

    mus = {s: rg.floquet_multipliers(lab, K, kz, eta, M, T, steps=s)[:4] for s in (8, 16, 32)}
    mu_moving = rg.floquet_multipliers(moving, K, kz, eta, M, T, steps=32)[:4]
    np.testing.assert_allclose(mu_moving, mus[32], rtol=1e-4)
    mu_steady = rg.floquet_multipliers(lambda t: roberts, K, kz, eta, M, T, steps=1)[:4]
    assert np.min(np.abs(mu_steady - mus[32]) / np.abs(mus[32])) > 0.1  # the frame velocity matters
    e1 = np.abs(mus[8][0] - mus[32][0])
    e2 = np.abs(mus[16][0] - mus[32][0])
    assert 8.0 < e1 / e2 < 40.0  # (256 - 1)/(16 - 1) = 17 for an order-4 scheme
    mu_minus = rg.floquet_multipliers(lab, K, -kz, eta, M, T, steps=8)[:4]
    assert_same_multiset(mu_minus, np.conj(mus[8]), atol=1e-10)
