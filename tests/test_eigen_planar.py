"""The planar reduction B = b(x, y) exp(i kz z) and the vector parametrisations of the eigen-solver.

Checks against things outside kindyn:

* the planar operator equals the independent dense Galerkin matrix of
  ``tests/reference/roberts_galerkin.py`` (Roberts flow and a Galloway-Proctor instant) to round-off:
  with the 2/3 rule the pseudo-spectral product of a one-mode flow is exactly the Galerkin truncation;
* the planar eigenvalues equal the 3-D eigenvalues on a box of height Lz = 2 pi / kz to 1e-8
  (Roberts, steady; Galloway-Proctor, Floquet) - an exact consequence of z-translation invariance
  (common practice: Roberts 1972, Phil. Trans. R. Soc. A 271, 411, separates exp(i kz z) the same way);
* exact identities of the parametrisations (Parseval energy, solenoidality, Hermitian kz = 0 plane).

Runtime: about 7 s on two idle cores.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from threadpoolctl import threadpool_limits

from kindyn.box import Box
from kindyn.calculus import divergence_hat
from kindyn.diagnostics.spectra import energy
from kindyn.eigen.basis import KzPlaneBasis, SolenoidalBasis
from kindyn.eigen.floquet import box_period_map, floquet_modes, kz_plane_period_map
from kindyn.eigen.krylov import leading_eigenpairs
from kindyn.eigen.z_independent import is_z_independent
from kindyn.induction import InductionOperator
from kindyn.layout import BoxLayout, KzPlane, KzPlaneLayout
from kindyn.eigen.propagator import box_propagator, kz_plane_propagator
from kindyn.errors import FlowError
from kindyn.flows.beltrami import ABCFlow
from kindyn.flows.cellular import GallowayProctorFlow, RobertsFlow
from kindyn.transforms import TransformSettings, make_engine

try:
    from tests.reference import roberts_galerkin as rg
except ImportError:  # plain `pytest` with rootdir-relative imports
    from reference import roberts_galerkin as rg

TWO_PI = 2 * math.pi


# ----------------------------------------------------------------------- parametrisations
@pytest.mark.parametrize("grid, lengths", [((8, 8, 8), (TWO_PI,) * 3), ((9, 10, 7), (TWO_PI, 4.0, 3 * math.pi))])
def test_box_basis_is_an_energy_isometry_onto_real_solenoidal_fields(grid, lengths):
    box = Box(lengths, grid)
    basis = SolenoidalBasis(BoxLayout(box))
    rng = np.random.default_rng(3)
    v = rng.standard_normal(basis.size)
    b_hat = basis.field_hat_from_vector(v, np.empty((3, *box.spectral_shape), complex))
    # exact: |v|^2 = <|B|^2>/2 (Parseval), div B = 0, zero mean, dealiased
    assert energy(b_hat, BoxLayout(box)) == pytest.approx(float(v @ v), rel=1e-13)
    assert np.max(np.abs(divergence_hat(b_hat, box))) < 1e-12
    assert np.all(b_hat[:, 0, 0, 0] == 0)
    assert np.all(b_hat[:, ~np.broadcast_to(box.dealias_mask, box.spectral_shape)] == 0)
    # the field is real: a round trip through physical space changes nothing
    engine = make_engine(box, TransformSettings(engine="scipy"))
    engine.spectral[...] = b_hat
    engine.backward()
    engine.forward()
    np.testing.assert_allclose(engine.spectral, b_hat, rtol=0, atol=1e-13)
    np.testing.assert_allclose(basis.vector_from_field_hat(b_hat), v, rtol=0, atol=1e-13)
    # dimension: two polarisations of every kept non-zero wavevector, real
    kept = int(np.prod([2 * ((n - 1) // 3) + 1 for n in grid]))
    assert basis.size == 2 * (kept - 1)


@pytest.mark.parametrize("kz", [0.0, 0.7])
def test_planar_basis_is_solenoidal_and_isometric(kz):
    grid = KzPlane((TWO_PI, 5.0), (10, 11), kz)
    layout = KzPlaneLayout(grid)
    basis = KzPlaneBasis(layout)
    rng = np.random.default_rng(4)
    v = rng.standard_normal(basis.size) + 1j * rng.standard_normal(basis.size)
    b_hat = basis.field_hat_from_vector(v, np.empty((3, 10, 11, 1), complex))
    kx, ky, _ = layout.wavenumbers
    assert np.max(np.abs(kx * b_hat[0] + ky * b_hat[1] + kz * b_hat[2])) < 1e-12
    assert np.sum(np.abs(b_hat) ** 2) == pytest.approx(np.vdot(v, v).real, rel=1e-13)
    np.testing.assert_allclose(basis.vector_from_field_hat(b_hat), v, rtol=0, atol=1e-13)
    assert basis.size == 2 * (7 * 7 - (1 if kz == 0 else 0))


# ---------------------------------------------------------- operator against the reference
def _reference_layout(b_hat, M, n):
    """Planar spectral array (3, n, n) -> reference vector (index 3 j + c, j = (m+M)(2M+1) + (l+M))."""
    r = np.arange(-M, M + 1)
    return np.stack([b_hat[:, m % n, l % n] for m in r for l in r]).ravel()


@pytest.mark.parametrize("n, kz, eta, flow, coeffs, engine", [
    (16, 0.5, 0.2, RobertsFlow(), rg.roberts_velocity_coefficients(1.0, "sum"), "fftw"),
    (17, 0.0, 0.13, RobertsFlow(U=0.8, form="product"), rg.roberts_velocity_coefficients(0.8, "product"), "scipy"),
    (16, 0.57, 0.2, GallowayProctorFlow(), rg.galloway_proctor_velocity_coefficients(0.9), "scipy"),
], ids=["roberts-sum", "roberts-product-odd-kz0", "gp-at-t0.9"])
def test_planar_operator_equals_dense_galerkin_matrix(n, kz, eta, flow, coeffs, engine):
    grid = KzPlane((TWO_PI, TWO_PI), (n, n), kz)
    M = (n - 1) // 3
    layout = KzPlaneLayout(grid, TransformSettings(engine=engine))
    operator = InductionOperator(layout, flow, eta)
    basis = KzPlaneBasis(layout)
    rng = np.random.default_rng(5)
    b_hat = basis.field_hat_from_vector(rng.standard_normal(basis.size) + 1j * rng.standard_normal(basis.size),
                                        np.empty((3, n, n, 1), complex))
    out = np.empty_like(b_hat)
    operator(0.9, b_hat, out)
    ours = _reference_layout(out - operator.decay_rates * b_hat, M, n)
    L = rg.induction_matrix(coeffs, 1.0, kz, eta, M)
    expected = L @ _reference_layout(b_hat, M, n)
    np.testing.assert_allclose(ours, expected, rtol=0, atol=1e-12 * np.abs(expected).max())


# ------------------------------------------------------------- planar equals the 3-D box
def _union_of_planar(flow, eta, kzs, n, dt, steps, count):
    values = []
    for kz in kzs:
        sol = leading_eigenpairs(kz_plane_propagator(KzPlane((TWO_PI, TWO_PI), n, kz), flow, eta, dt, steps),
                                 count, tolerance=1e-13)
        values += list(sol.eigenvalues)
        if kz > 0:
            values += list(np.conj(sol.eigenvalues))  # the -kz problem is the complex conjugate
    return np.array(values)


def _distinct_leading(values, count, atol=1e-6):
    """The ``count`` largest-growth distinct eigenvalues (copies within ``atol`` merged)."""
    values = np.asarray(values)[np.lexsort((-np.asarray(values).imag, -np.round(np.asarray(values).real, 9)))]
    distinct = []
    for v in values:
        if all(abs(v - d) > atol for d in distinct):
            distinct.append(v)
    return np.array(distinct[:count])


def test_planar_roberts_equals_box_with_height_two_pi_over_kz():
    # box of height 4 pi holds kz = 0 and +-0.5 (nz = 4 keeps |m_z| <= 1); odd, non-square plane.
    # The box spectrum is the union of the planar spectra at kz = 0 and 0.5 (+ conjugates at -0.5);
    # eigenvalues at +-kz are exactly degenerate in the box, and a single-vector Krylov method finds
    # such copies only through round-off, so distinct values are compared.
    eta, kz, plane, dt, steps = 0.2, 0.5, (13, 14), 0.05, 10
    flow = RobertsFlow()
    box = Box((TWO_PI, TWO_PI, TWO_PI / kz), (*plane, 4))
    with threadpool_limits(limits=1, user_api="blas"):
        box_values = leading_eigenpairs(box_propagator(box, flow, eta, dt, steps), 6, tolerance=1e-13).eigenvalues
    planar = _union_of_planar(flow, eta, (0.0, kz), plane, dt, steps, 5)
    np.testing.assert_allclose(_distinct_leading(box_values, 3), _distinct_leading(planar, 3), rtol=0, atol=1e-8)


def test_planar_galloway_proctor_floquet_equals_box():
    eta, kz, plane, dt = 0.2, 0.57, (12, 12), 0.1
    flow = GallowayProctorFlow()
    box = Box((TWO_PI, TWO_PI, TWO_PI / kz), (*plane, 4))
    box_solution = floquet_modes(box_period_map(box, flow, eta, dt), 3, tolerance=1e-13)
    planar = floquet_modes(kz_plane_period_map(KzPlane((TWO_PI, TWO_PI), plane, kz), flow, eta, dt), 3,
                           tolerance=1e-13)
    # the leading Floquet mode (gamma ~ 0.2 at kz = 0.57) and its -kz conjugate lead the box spectrum
    lead = planar.eigenvalues[0]
    np.testing.assert_allclose(sorted(box_solution.eigenvalues[:2], key=lambda p: p.imag),
                               sorted([lead, np.conj(lead)], key=lambda p: p.imag), rtol=0, atol=1e-8)
    assert box_solution.frequency_modulus == pytest.approx(1.0)  # 2 pi / period, period 2 pi


# ------------------------------------------------------------------ detection of z-independence
class _Tilted:
    """Declares z-independence but depends on z (a mistake the check must catch)."""

    steady, period, z_independent = True, None, True

    def velocity(self, x, y, z, t):
        return (np.cos(y) + 0 * z, np.sin(x + 0.1 * z) + 0 * y, 0 * x + 0 * y + 0 * z)


class _Undeclared:
    steady, period = True, None

    def velocity(self, x, y, z, t):
        return (np.cos(y) + 0 * x, np.sin(x) + 0 * y, np.cos(x) + np.sin(y))


def test_z_independence_is_declared_and_checked():
    box = Box((TWO_PI,) * 3, (8, 8, 8))
    assert is_z_independent(RobertsFlow(), box)
    assert is_z_independent(GallowayProctorFlow(), box)
    assert is_z_independent(ABCFlow(A=0.0), box)
    assert not is_z_independent(ABCFlow(), box)
    assert is_z_independent(_Undeclared(), box)
    with pytest.raises(FlowError, match="z_independent"):
        is_z_independent(_Tilted(), box)


# ------------------------------------------------------------------- the two Krylov solvers agree
def test_growing_arnoldi_arpack_and_the_fallback_agree_with_the_dense_reference():
    # Roberts flow, eta = 0.2, kz = 0.5 on a 16^2 plane (|m| <= 5, as M = 5 in the reference)
    grid = KzPlane((TWO_PI, TWO_PI), (16, 16), 0.5)
    propagator = kz_plane_propagator(grid, RobertsFlow(), 0.2, 0.05, 20)
    with threadpool_limits(limits=1, user_api="blas"):
        dense = rg.leading_eigenvalues(rg.roberts_velocity_coefficients(), 1.0, 0.5, 0.2, 5, count=3)
    results = [leading_eigenpairs(propagator, 3, tolerance=1e-12, solver="arnoldi"),
               leading_eigenpairs(propagator, 3, tolerance=1e-12, solver="arpack"),
               leading_eigenpairs(propagator, 3, tolerance=1e-12, solver="arnoldi", krylov_dimension=6)]
    for solution in results:  # the last one outgrows its 6-vector basis and restarts with ARPACK
        np.testing.assert_allclose(solution.eigenvalues.real, dense.real, rtol=0, atol=1e-7)
        assert np.all(solution.residuals < 1e-10)
