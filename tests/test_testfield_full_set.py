"""The full mean-field coefficient set: three averaging directions, beta_ijk, Rädler's decomposition,
pumping, and the files that hold them.

Sources beside each check: exact algebra (the decomposition reproduces the EMF of manufactured
tensors), symmetry groups of the flows (verified numerically here, then used to derive what the
coefficients must satisfy), closed-form SOCA (derived below from tests/test_testfield_abc.py), and
the published pumping of the Galloway–Proctor flow (Rädler & Brandenburg 2009, MNRAS 393, 113;
recalled from memory). Conventions: kindyn/testfield/full_set.py.

A flow with ``u(R x + c) = R u(x)`` for a rotation ``R`` (a signed permutation matrix, det 1) and a
shift ``c`` maps a test problem with mean field ``Bbar(x)`` to one with ``R Bbar(R^-1 (x - c))``, so
the coefficients satisfy ``a = R a R^T`` (uniform fields), ``alpha^(s') = R alpha^(s) R^T`` and
``eta^(s') = R eta^(s) R^T`` for the planar averages (``R e_s = +-e_s'``; the planar coefficients are
even in K: the pair ``cos, sin`` of ``-K`` spans the same space), and
``b_ijk = R_il R_jm R_kn b_lmn``. The shift only moves the phase of the test fields, which the
extraction (a projection over the whole axis) does not see.
"""

from __future__ import annotations

import itertools
import json
import math
from pathlib import Path

import numpy as np
import pytest

from kindyn.case import load_case
from kindyn.cli import main
from kindyn.flows.beltrami import ABCFlow
from kindyn.flows.cellular import RobertsFlow
from kindyn.testfield import full_set
from kindyn.testfield.calibration import TestFieldResult, calibrate
from kindyn.testfield.extraction import beta_from_eta
from kindyn.testfield.full_set import EPS, determined_mask

CF_TABLES = Path(__file__).parent / "data" / "cf"
R90Z = np.array([[0, -1, 0], [1, 0, 0], [0, 0, 1]])  # e_x -> e_y, e_y -> -e_x
C3 = np.array([[0, 0, 1], [1, 0, 0], [0, 1, 0]])  # e_x -> e_y -> e_z -> e_x
DIAGONAL = np.array([[0, 1, 0], [1, 0, 0], [0, 0, -1]])  # pi about the line x = y: x <-> y, z -> -z


def symmetry_shift(flow, R):
    """A shift ``c`` in multiples of pi/2 with ``u(R x + c) = R u(x)`` at random points, or None."""
    x = np.random.default_rng(1).uniform(0, 2 * np.pi, (3, 40))
    u = np.array(flow.velocity(*x, 0.0))
    for c in itertools.product(range(4), repeat=3):
        c = np.array(c) * np.pi / 2
        if np.allclose(np.array(flow.velocity(*(R @ x + c[:, None]), 0.0)), R @ u, rtol=0, atol=1e-12):
            return c
    return None


def cf_errors(path) -> list:
    from cfchecker.cfchecks import CFChecker

    checker = CFChecker(cfStandardNamesXML=str(CF_TABLES / "cf-standard-name-table.xml"),
                        cfAreaTypesXML=str(CF_TABLES / "area-type-table.xml"),
                        cfRegionNamesXML=str(CF_TABLES / "standardized-region-list.xml"), version="1.8", silent=True)
    result = checker.checker(str(path))
    problems = list(result["global"]["FATAL"]) + list(result["global"]["ERROR"]) + list(result["global"]["WARN"])
    for name, v in result["variables"].items():
        problems += [f"{name}: {m}" for m in v["FATAL"] + v["ERROR"] + v["WARN"]]
    return problems


def by_axis(result, base, soca=False):
    """``(3, nK, 3, 3)`` planar tensors with zeros in the column of the axis (for rotations)."""
    out = np.zeros((3, len(result.K), 3, 3))
    for s in result.directions:
        perp = [j for j in range(3) if j != s]
        out[s][:, :, perp] = result.planar(base, s, soca)
    return out


# ---- the decomposition is exact algebra ------------------------------------------------------------

def eta_from_beta_column(b, s):
    """Planar ``eta^(s)`` (3 x 2) whose ``beta_from_eta`` is ``b[:, perp, s]`` (inverse of a 2 x 2 map)."""
    perp = [j for j in range(3) if j != s]
    W = np.array([[-EPS[l, s, j] for j in perp] for l in perp])  # b_ijs = eta_il W_lj
    return b[:, perp, s] @ np.linalg.inv(W)


def test_decomposition_reproduces_the_emf_of_manufactured_tensors(rng):
    """Random a_ij and b_ijk: the planar eta^(s) they imply, assembled and decomposed, give back b_ijk
    (j != k) with NaN at j = k, and for every mean field with no d_j B_j terms (zero diagonal of
    G_jk = d_k B_j, as planar fields have) ``a B + b G = alpha B + gamma x B - beta J - delta x J -
    kappa G^(s)`` to round-off (J_l = eps_lmn G_nm). Also delta_planar = delta_s - (kappa_pps + kappa_qqs)/2."""
    a, b = rng.standard_normal((3, 3)), rng.standard_normal((3, 3, 3))
    values = {"alpha": a, "alpha_soca": a}
    for s in range(3):
        eta_s = eta_from_beta_column(b, s)
        np.testing.assert_allclose(beta_from_eta(eta_s, s), b[:, [j for j in range(3) if j != s], s], atol=1e-14)
        for soca in (False, True):
            values[full_set.planar_name("alpha_K", s, 2, soca)] = rng.standard_normal((1, 3, 2))
            values[full_set.planar_name("eta_K", s, 2, soca)] = eta_s[None]
    d = full_set.derive(values, (0, 1, 2), 2, soca=False)
    mask = determined_mask()
    np.testing.assert_allclose(d["beta_ijk"][0][mask], b[mask], rtol=0, atol=1e-13)
    assert np.all(np.isnan(d["beta_ijk"][0][~mask])) and np.all(np.isnan(d["kappa"][0][~mask]))
    B = rng.standard_normal(3)
    G = rng.standard_normal((3, 3))
    np.fill_diagonal(G, 0.0)
    J = np.einsum("lmn,nm->l", EPS, G)
    Gs = 0.5 * (G + G.T)
    direct = a @ B + np.einsum("ijk,jk->i", np.where(mask, b, 0.0), G)
    kappa = np.nan_to_num(d["kappa"][0])
    decomposed = (d["alpha_sym"] @ B + np.cross(d["gamma"], B) - d["beta_sym"][0] @ J - np.cross(d["delta"][0], J)
                  - np.einsum("ijk,jk->i", kappa, Gs))
    np.testing.assert_allclose(decomposed, direct, rtol=0, atol=1e-13)
    for s in range(3):
        p, q = (s + 1) % 3, (s + 2) % 3
        want = d["delta"][0][s] - 0.5 * (kappa[p, p, s] + kappa[q, q, s])
        assert d["delta_planar"][0][s] == pytest.approx(want, abs=1e-13)


def test_isotropic_beta_gives_eta_t_and_no_delta_or_kappa():
    """b_ijk = eta_t eps_ijk: eta_il = beta_ij = eta_t delta_ij, delta = kappa = 0 (design.md section 1:
    Ebar = alpha B - eta_t curl B)."""
    parts = full_set.beta_parts(np.where(determined_mask(), 0.7 * EPS, np.nan))
    np.testing.assert_allclose(parts["eta_ij"], 0.7 * np.eye(3), atol=1e-15)
    np.testing.assert_allclose(parts["delta"], 0.0, atol=1e-15)
    np.testing.assert_allclose(parts["kappa"][determined_mask()], 0.0, atol=1e-15)


# ---- the 1:1:1 ABC flow ------------------------------------------------------------------------------

ABC = """
[domain]
grid = [12, 12, 12]
[flow]
type = "abc"
A = {A}
B = {B}
C = {C}
[magnetic]
eta = {eta}
[testfield]
modes = [1, 2]
all_directions = true
onset_check = false
"""


def test_abc_symmetry_isotropic_alpha_no_pumping_and_beta_eta_t_eps():
    """ABC with A = B = C = 1 at Rm = 2 (direct steady solves, GMRES residual ~1e-11).

    Derivation. The flow satisfies u(R x + c) = R u(x) for R = R90z with c = (pi/2, pi/2, 3 pi/2) and for
    the cyclic permutation C3 (120 degrees about (1, 1, 1)) with c = 0 (checked below at random points);
    these two generate the 24 rotations of the cube (group O). Hence (module docstring) a = R a R^T for
    all of O: invariance under the three pi rotations about the axes kills the off-diagonal entries,
    C3 makes the diagonal equal, so a = alpha I (isotropic) and gamma_i = -eps_ijk a_jk/2 = 0. The
    planar coefficients along x, y, z are images of each other under O: the same functions of K. For
    b_ijk, invariance under the pi rotations diag(-1, -1, 1) etc. leaves only components whose numbers
    of x, y and z indices are all odd, i.e. i, j, k distinct; R90z gives b_yxz = -b_xyz and C3 makes the
    cyclic ones equal: b_ijk = c eps_ijk, the only isotropic rank-3 tensor under O. With the convention
    Ebar_i = a_ij Bbar_j + b_ijk d_k Bbar_j, b_ijk d_k B_j = c eps_ijk d_k B_j = -c (curl B)_i, so
    c = +eta_t (the in-plane mean of eta_ij): b_xyz = +eta_t, b_yxz = -eta_t. The j = k components are
    not determined (NaN). Checked to 1e-9 relative (solver tolerance 1e-11 with margin)."""
    flow = ABCFlow()
    assert symmetry_shift(flow, R90Z) is not None and symmetry_shift(flow, C3) is not None
    r = calibrate(load_case("abc.toml", [], text=ABC.format(A=1.0, B=1.0, C=1.0, eta=0.5)))
    a = r.tensors["alpha"]
    scale = abs(a[0, 0])
    np.testing.assert_allclose(a, a[0, 0] * np.eye(3), rtol=0, atol=1e-9 * scale)
    np.testing.assert_allclose(r.full_set["gamma"], 0.0, atol=1e-9 * scale)
    np.testing.assert_allclose(r.full_set["gamma_K"], 0.0, atol=1e-9 * scale)
    A, E = by_axis(r, "alpha_K"), by_axis(r, "eta_K")
    for R in (R90Z, C3):
        for s in range(3):
            t = int(np.flatnonzero(R[:, s])[0])
            for n in range(len(r.K)):
                np.testing.assert_allclose(R @ A[s][n] @ R.T, A[t][n], rtol=0, atol=1e-9 * scale)
                np.testing.assert_allclose(R @ E[s][n] @ R.T, E[t][n], rtol=0, atol=1e-9 * scale)
    for s in range(3):
        np.testing.assert_allclose(r.horizontal(axis=s)[0], r.horizontal()[0], rtol=1e-9)
        np.testing.assert_allclose(r.horizontal(axis=s)[1], r.horizontal()[1], rtol=1e-9)
    mask = determined_mask()
    for n, eta_t in enumerate(r.horizontal()[1]):
        b = r.full_set["beta_ijk"][n]
        np.testing.assert_allclose(b[mask], eta_t * EPS[mask], rtol=0, atol=1e-9 * eta_t)
        assert b[0, 1, 2] == pytest.approx(eta_t, rel=1e-9) and np.all(np.isnan(b[~mask]))
        np.testing.assert_allclose(r.full_set["eta_ij"][n], eta_t * np.eye(3), rtol=0, atol=1e-9 * eta_t)
        np.testing.assert_allclose(r.full_set["delta"][n], 0.0, atol=1e-9 * eta_t)
        np.testing.assert_allclose(r.full_set["kappa"][n][mask], 0.0, atol=1e-9 * eta_t)


@pytest.mark.parametrize("A, B, C, eta", [(0.7, 1.3, 0.4, 0.8), (0.0, 1.0, 1.0, 1.0), (1.1, 0.6, 1.7, 2.0)])
def test_soca_closed_forms_along_x_and_y(A, B, C, eta):
    """SOCA for x- and y-dependent test fields of ABC(A, B, C), k = 1, derived from the z result of
    tests/test_testfield_abc.py (alpha_xx = -B^2 k/d, alpha_yy = -C^2 k/d, eta_xx = eta_yy = (B^2 + C^2)/(2 d),
    d = eta (k^2 + K^2)) by relabelling the axes: in x' = y, y' = z, z' = x the flow is ABC(B, C, A), so the
    x averages have alpha_yy = -C^2 k/d, alpha_zz = -A^2 k/d, eta_yy = eta_zz = (A^2 + C^2)/(2 d); in
    x' = z, y' = x, z' = y it is ABC(C, A, B), so the y averages have alpha_zz = -A^2 k/d, alpha_xx =
    -B^2 k/d, eta_zz = eta_xx = (A^2 + B^2)/(2 d). Every other entry is 0. To round-off (1e-13 of the scale)."""
    r = calibrate(load_case("abc.toml", [], text=ABC.format(A=A, B=B, C=C, eta=eta)))
    k = 1.0
    scale = (A ** 2 + B ** 2 + C ** 2) / eta
    want = {0: ({1: -C ** 2, 2: -A ** 2}, (A ** 2 + C ** 2) / 2), 1: ({2: -A ** 2, 0: -B ** 2}, (A ** 2 + B ** 2) / 2),
            2: ({0: -B ** 2, 1: -C ** 2}, (B ** 2 + C ** 2) / 2)}
    for s in range(3):
        perp = [j for j in range(3) if j != s]
        for n, K in enumerate(r.K):
            d = eta * (k ** 2 + K ** 2)
            alpha, eta_ij = np.zeros((3, 2)), np.zeros((3, 2))
            for c, j in enumerate(perp):
                alpha[j, c] = want[s][0][j] * k / d
                eta_ij[j, c] = want[s][1] / d
            np.testing.assert_allclose(r.planar("alpha_K", s, soca=True)[n], alpha, rtol=0, atol=1e-13 * scale)
            np.testing.assert_allclose(r.planar("eta_K", s, soca=True)[n], eta_ij, rtol=0, atol=1e-13 * scale)


# ---- Roberts flow ---------------------------------------------------------------------------------

def test_roberts_alpha_zz_zero_no_pumping_and_x_y_symmetry():
    """Roberts flow (sum form, k = 1) at Rm = 2, direct solves, x and y test fields (z ones too).

    Symmetries used (checked numerically below): (i) z-independence: for B_T = e_z,
    curl(u x e_z) = (0, 0, -div_h u_h) = (0, 0, d_z u_z) = 0, so b = 0 solves the full problem and the
    whole column alpha_iz vanishes, alpha_zz = 0 among it; (ii) u(R x + c) = R u(x) for the quarter turn
    R90z with c = (pi/2, pi/2, 0): a = R a R^T gives alpha_xx = alpha_yy, alpha_xy = -alpha_yx and
    gamma_x = gamma_y = 0 (gamma = R gamma), and it maps the x averages onto the y averages:
    alpha^(y) = R alpha^(x) R^T, eta^(y) = R eta^(x) R^T; (iii) the half turn about the line x = y
    (x <-> y, z -> -z) with c = (pi/2, 3 pi/2, 0): gamma_z = -gamma_z = 0 and alpha_xy = alpha_yx
    (so, with (ii), alpha_xy = 0). In SOCA and in full, to the GMRES residual (1e-9 of the scale)."""
    flow = RobertsFlow()
    assert symmetry_shift(flow, R90Z) is not None and symmetry_shift(flow, DIAGONAL) is not None
    text = """
    [domain]
    grid = [16, 16, 8]
    [flow]
    type = "roberts"
    [magnetic]
    Rm = 2.0
    [testfield]
    modes = [1]
    all_directions = true
    onset_check = false
    """
    r = calibrate(load_case("roberts.toml", [], text=text))
    for soca in (False, True):
        sfx = "_soca" if soca else ""
        a = r.tensors["alpha" + sfx]
        scale = abs(a[0, 0])
        np.testing.assert_allclose(a[:, 2], 0.0, atol=1e-13 * scale)
        assert a[0, 0] == pytest.approx(a[1, 1], rel=1e-9) and abs(a[0, 1]) < 1e-9 * scale
        np.testing.assert_allclose(r.full_set["gamma" + sfx], 0.0, atol=1e-9 * scale)
        np.testing.assert_allclose(r.full_set["gamma_K" + sfx], 0.0, atol=1e-9 * scale)
        A, E = by_axis(r, "alpha_K", soca), by_axis(r, "eta_K", soca)
        np.testing.assert_allclose(R90Z @ A[0][0] @ R90Z.T, A[1][0], rtol=0, atol=1e-9 * scale)
        np.testing.assert_allclose(R90Z @ E[0][0] @ R90Z.T, E[1][0], rtol=0, atol=1e-9 * scale)


# ---- pumping in the Galloway–Proctor flow ------------------------------------------------------------

GP = """
[domain]
grid = [12, 12, 4]
[flow]
type = "galloway-proctor"
[magnetic]
Rm = 1.0
[run]
time_step = {dt}
[testfield]
modes = [1]
settle_time = 14.0
tolerance = 1e-7
"""


def test_galloway_proctor_pumping_full_but_not_soca_and_converged():
    """Circularly polarised GP flow (eps = omega = 1) at Rm = 1, time stepping over whole periods.

    SOCA: the period-averaged SOCA alpha of this flow is diagonal (derivation in
    tests/test_testfield_time.py: the cross terms are odd in a(t) - a(t') and average out), so its
    gamma vanishes: checked to round-off (1e-12 of |alpha|). Full: the antisymmetric alpha_xy = -alpha_yx
    gives gamma_z = -(alpha_xy - alpha_yx)/2 != 0 (Rädler & Brandenburg 2009, MNRAS 393, 113, found
    pumping in this flow beyond SOCA; recalled from memory): here gamma_z(K = 0) is 8.6 % of |alpha_xx|.
    Converged: unchanged under refinement of the grid 12^2 -> 16^2 and under halving of the time step to
    1e-4 relative, and the same with resets every 40 time units (settle 14) within its errors (3 sigma)."""
    dt = 2 * math.pi / 64
    base = calibrate(load_case("gp.toml", [], text=GP.format(dt=dt)))
    assert base.converged, base.stop_reason
    alpha = abs(base.tensors["alpha"][0, 0])
    np.testing.assert_allclose(base.full_set["gamma_soca"], 0.0, atol=1e-12 * alpha)
    assert abs(base.full_set["gamma_K_soca"][0, 2]) < 1e-12 * alpha
    g0, gK = base.full_set["gamma"][2], base.full_set["gamma_K"][0, 2]
    assert g0 > 0.05 * alpha and g0 > 1e3 * base.full_set_errors["gamma"][2]
    assert abs(gK) > 1e3 * base.full_set_errors["gamma_K"][0, 2]
    np.testing.assert_allclose(base.full_set["gamma"][:2], 0.0, atol=1e-12 * alpha)  # z-independent flow
    fine = calibrate(load_case("gp.toml", ["domain.grid=[16, 16, 4]"], text=GP.format(dt=dt)))
    half = calibrate(load_case("gp.toml", [], text=GP.format(dt=dt / 2)))
    for other in (fine, half):
        assert other.full_set["gamma"][2] == pytest.approx(g0, rel=1e-4)
        assert other.full_set["gamma_K"][0, 2] == pytest.approx(gK, rel=1e-4)
    reset = calibrate(load_case("gp.toml", ["testfield.reset_interval=40.0", "testfield.max_time=200.0"],
                                text=GP.format(dt=dt)))
    for name, i in (("gamma", 2), ("gamma_K", (0, 2))):
        e = math.hypot(reset.full_set_errors[name][i], base.full_set_errors[name][i])
        assert abs(reset.full_set[name][i] - base.full_set[name][i]) <= 3 * e + 1e-14 * alpha


# ---- findings --------------------------------------------------------------------------------------------

def test_negative_eddy_diffusivity_is_a_finding_with_its_error():
    """A manufactured result with eta_t = -0.3 +- 0.01 at K = 2 (eta = 0.2): two findings, negative eddy
    diffusivity and negative total diffusivity (eta + eta_t = -0.1), both significant (> 2 errors);
    eta_t = -0.001 +- 0.01 at K = 1 is a finding that is not significant."""
    eta_K = np.zeros((2, 3, 2))
    eta_K[0, 0, 0] = eta_K[0, 1, 1] = -0.001
    eta_K[1, 0, 0] = eta_K[1, 1, 1] = -0.3
    zeros = np.zeros((2, 3, 2))
    err = np.full((2, 3, 2), 0.01)
    r = TestFieldResult(2, (1, 2), np.array([1.0, 2.0]), "time", 5.0, 0.2, 1.0, 1.0, True, "converged",
                        tensors={"alpha_K": zeros, "eta_K": eta_K, "alpha_K_soca": zeros, "eta_K_soca": zeros},
                        errors={"alpha_K": err, "eta_K": err, "alpha_K_soca": err, "eta_K_soca": err})
    found = full_set.findings(r)
    kinds = {(f["kind"], f["K"]): f for f in found}
    assert kinds[("negative_eddy_diffusivity", 2.0)]["significant"]
    assert kinds[("negative_total_diffusivity", 2.0)]["value"] == pytest.approx(-0.1)
    assert kinds[("negative_total_diffusivity", 2.0)]["error"] == pytest.approx(0.01)
    assert not kinds[("negative_eddy_diffusivity", 1.0)]["significant"]
    assert ("negative_total_diffusivity", 1.0) not in kinds


# ---- the command and its file -------------------------------------------------------------------------

def test_three_direction_command_json_and_cf_clean_file(write_case, tmp_path, capsys):
    """``kindyn testfield`` with all_directions: JSON has the three directions, beta_ijk with null where
    not determined and the text saying why; the netCDF file passes the CF-1.8 checker (cfchecker 4.1)
    with no error or warning, K is an index coordinate, components are labelled x, y, z, the
    determined-flag is a number with flag_meanings, and the sign conventions are attributes."""
    path = write_case(ABC.format(A=1.0, B=0.8, C=0.6, eta=1.0), "abc3.toml")
    code = main(["testfield", str(path), "--out", str(tmp_path / "o"), "--json", "--quiet"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    data = json.loads(captured.out)
    assert data["directions"] == ["x", "y", "z"] and set(data["planar"]) == {"x", "y", "z"}
    b = np.array(data["full_set"]["beta_ijk"], dtype=float)
    assert b.shape == (2, 3, 3, 3) and np.all(np.isnan(b[:, ~determined_mask()]))
    assert np.all(np.isfinite(b[:, determined_mask()]))
    assert "div Bbar" in data["beta_undetermined"] and "Raedler" in data["sign_convention_full_set"]
    nc_path = tmp_path / "o" / "abc3-testfield.nc"
    assert cf_errors(nc_path) == []
    import xarray as xr

    with xr.open_dataset(nc_path) as ds:
        assert "K" in ds.indexes and list(ds["K"].values) == [1.0, 2.0]
        assert [str(v) for v in ds["emf_component_label"].values] == ["x", "y", "z"]
        flag = ds["beta_ijk_determined"]
        assert flag.attrs["flag_meanings"] == "not_determined determined"
        assert int(flag.sel(emf_component=0, field_component=1, derivative_component=2)) == 1
        assert int(flag.sel(emf_component=0, field_component=1, derivative_component=1)) == 0
        assert all("units" in ds[v].attrs and "long_name" in ds[v].attrs for v in ds.variables)
        assert "gamma_i = -eps_ijk a_jk/2" in ds.attrs["sign_convention_full_set"]
        assert ds.attrs["kindyn_command"].startswith("kindyn testfield")
        np.testing.assert_allclose(ds["beta_ijk"].values, b, equal_nan=True)


def test_one_axis_mode_along_any_axis_equals_the_three_direction_set():
    """The one-axis mode (``axis = "x"`` or ``"y"``, all_directions = false) gives the same planar tensors as
    the same direction within the three-direction set (the same test problems; to 1e-10 of the scale), on a
    non-cubic box, and reports only gamma_s(K) and delta_planar_s of its own axis."""
    text = ABC.format(A=0.9, B=1.2, C=0.5, eta=1.0).replace("grid = [12, 12, 12]", "grid = [12, 10, 14]")
    full = calibrate(load_case("abc.toml", [], text=text))
    for axis in (0, 1):
        one = calibrate(load_case("abc.toml", [f'testfield.axis="{"xyz"[axis]}"', "testfield.all_directions=false"],
                                  text=text))
        assert one.directions == (axis,)
        scale = np.max(np.abs(full.planar("eta_K", axis)))
        for base in ("alpha_K", "eta_K"):
            np.testing.assert_allclose(one.planar(base), full.planar(base, axis), rtol=0, atol=1e-10 * scale)
        assert np.all(np.isnan(np.delete(one.full_set["gamma_K"], axis, axis=1)))
        assert np.isfinite(one.full_set["delta_planar"][:, axis]).all() and "eta_ij" not in one.full_set
