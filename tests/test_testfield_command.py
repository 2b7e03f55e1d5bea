"""``kindyn testfield`` end to end: JSON keys and shapes, the netCDF record, the figure, bad input, and
the closure check against an independent reference.

References: the SOCA closed form of the ABC flow (derived in tests/test_testfield_abc.py) for the
printed numbers; the Galerkin reference tests/reference/roberts_galerkin.py for the growth rate of
the box-scale mode reported by the closure check's direct run.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from kindyn.cli import main
from kindyn.output.netcdf import read_dataset

try:  # `python -m pytest` from the repository root puts the root on sys.path
    from tests.reference import roberts_galerkin as rg
except ImportError:  # plain `pytest` with rootdir-relative imports
    from reference import roberts_galerkin as rg

ABC_CASE = """
[domain]
grid = [12, 12, 12]
[flow]
type = "abc"
[magnetic]
Rm = 2.0
[testfield]
modes = [1, 2]
"""


def run_cli(capsys, *argv):
    code = main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_json_netcdf_and_figure(write_case, tmp_path, capsys):
    path = write_case(ABC_CASE, "abc-cal.toml")
    code, out, err = run_cli(capsys, "testfield", str(path), "--out", str(tmp_path / "o"), "--json", "--quiet")
    assert code == 0, err
    data = json.loads(out)
    for key in ("alpha", "alpha_soca", "K", "alpha_K", "eta_K", "alpha_K_soca", "eta_K_soca", "Rm", "eta", "converged"):
        assert key in data
    assert np.shape(data["alpha"]) == (3, 3) and np.shape(data["alpha_soca"]) == (3, 3)
    assert data["K"] == [1.0, 2.0]
    for key in ("alpha_K", "eta_K", "alpha_K_soca", "eta_K_soca"):
        assert np.shape(data[key]) == (2, 3, 2)
    assert data["converged"] is True and data["Rm"] == 2.0 and data["eta"] == pytest.approx(0.5)
    assert data["mean_components"] == ["x", "y"]
    # SOCA closed form (A = B = C = 1, k = 1): alpha_11 = -1/(eta (1 + K^2)), eta_22 = 1/(eta (1 + K^2))
    for K, a, e in zip(data["K"], data["alpha_K_soca"], data["eta_K_soca"]):
        assert a[0][0] == pytest.approx(-1 / (0.5 * (1 + K ** 2)), rel=1e-12)
        assert e[1][1] == pytest.approx(1 / (0.5 * (1 + K ** 2)), rel=1e-12)
    assert any("SOCA" in c and "small Rm" in c for c in data["cautions"])
    nc = read_dataset(tmp_path / "o" / "abc-cal-testfield.nc")
    np.testing.assert_array_equal(nc["alpha"], np.array(data["alpha"]))
    np.testing.assert_array_equal(nc["eta_K_soca"], np.array(data["eta_K_soca"]))
    assert nc["alpha_K"].shape == (2, 3, 2) and nc["beta_K"].shape == (2, 3, 2)
    assert np.all(np.isnan(nc["alpha_K_error"]))  # direct steady solve: no statistical error
    attrs = nc["attributes"]
    assert "eta_ij (curl Bbar)_j" in attrs["sign_convention"]
    assert "small Rm" in attrs["soca_caution"] and "reset interval" in attrs["reset_caution"]
    assert json.loads(attrs["kernel_fits"])["alpha_soca"]["kc"] == pytest.approx(1.0, rel=1e-10)
    assert (tmp_path / "o" / "abc-cal-testfield.png").stat().st_size > 1000


def test_time_dependent_flow_reports_errors_and_blocks(write_case, tmp_path, capsys):
    text = """
    [domain]
    grid = [8, 8, 4]
    [flow]
    type = "galloway-proctor"
    [magnetic]
    Rm = 1.0
    [testfield]
    modes = [1]
    uniform = false
    max_time = 40.0
    tolerance = 1e-12
    [output]
    figure = false
    """
    path = write_case(text, "gp.toml")
    code, out, err = run_cli(capsys, "testfield", str(path), "--out", str(tmp_path), "--json", "--quiet")
    assert code == 0, err
    data = json.loads(out)
    assert data["alpha"] is None and data["converged"] is False and "max_time" in data["stop_reason"]
    assert data["method"] == "time"
    errors = np.array(data["alpha_K_error"], float)
    assert np.all(np.isfinite(errors)) and np.all(errors >= 0)
    nc = read_dataset(tmp_path / "gp-testfield.nc")
    assert nc["block_alpha_K"].shape[1:] == (1, 3, 2)
    assert nc["block_time"][0] == pytest.approx(2 * math.pi)  # blocks are whole flow periods


@pytest.mark.parametrize("override, key", [
    ("testfield.modes=[9]", "testfield.modes"),
    ("testfield.sideways=1", "testfield.sideways"),
    ("testfield.method=\"sometimes\"", "testfield.method"),
])
def test_bad_input_is_one_line_and_exit_code_2(write_case, tmp_path, capsys, override, key):
    path = write_case(ABC_CASE, "bad.toml")
    code, out, err = run_cli(capsys, "testfield", str(path), "--out", str(tmp_path), "--set", override)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and key in lines[0] and "bad.toml" in lines[0] and "Traceback" not in err
    assert not (tmp_path / "bad-testfield.nc").exists()


def test_closure_check_reports_mean_field_and_direct_growth_rates(write_case, tmp_path, capsys):
    """Roberts flow with k_f = 2 in a 2 pi box at Rm = 1.5: the direct run's growth rate equals the
    Galerkin reference for the kz = 1 mode (0.05296 at M = 10; atol 5e-4: growth-estimator
    tolerance), and the report gives p = |alpha| K - (eta + eta_t) K^2 with the relative difference."""
    text = """
    [domain]
    grid = [24, 24, 4]
    [flow]
    type = "roberts"
    k = 2.0
    [magnetic]
    Rm = 1.5
    [run]
    tolerance = 1e-4
    [testfield]
    modes = [1]
    uniform = false
    closure = true
    [output]
    figure = false
    """
    path = write_case(text, "roberts-closure.toml")
    code, out, err = run_cli(capsys, "testfield", str(path), "--out", str(tmp_path), "--json", "--quiet")
    assert code == 0, err
    data = json.loads(out)
    c = data["closure"]
    coeffs = rg.roberts_velocity_coefficients(1.0, "sum")
    reference = rg.leading_eigenvalues(coeffs, 2.0, 1.0, data["eta"], 10, count=1,
                                       c4_centre=rg.roberts_rotation_centre(2.0, "sum"))[0].real
    assert c["direct_growth_rate"] == pytest.approx(reference, abs=5e-4)
    a, e = data["alpha_horizontal"][0], data["eta_t"][0]
    assert c["mean_field_growth_rate"] == pytest.approx(abs(a) - (data["eta"] + e), rel=1e-12)
    assert c["relative_difference"] == pytest.approx(
        abs(c["mean_field_growth_rate"] - c["direct_growth_rate"]) / abs(c["direct_growth_rate"]), rel=1e-12)
    assert c["scale_separation"] == 2.0 and c["direct_box_scale_mean_share"] > 0.5



def test_progress_has_an_eta_for_both_methods(write_case, tmp_path, capsys):
    """Common practice (as ``kindyn run`` and ``modes``): progress lines carry the elapsed time and an
    ETA. Direct solves: solve i of n (3 uniform + 4 per K), ETA at the mean time per solve from the
    second on. Time stepping: error / tolerance falling as C t^-p reaches 1 at t_c = C^(1/p) (exact for
    a power law, as tests/test_notebook_api.py checks for GrowthEta); at 2 time units per second
    the ETA is (t_c - t)/2."""
    from kindyn.case import load_case
    from kindyn.commands.testfield import testfield_progress
    from kindyn.testfield.calibration import CalibrationProgress
    from kindyn.testfield.settings import plan_from_case

    path = write_case(ABC_CASE, "abc-eta.toml")
    code, out, err = run_cli(capsys, "testfield", str(path), "--out", str(tmp_path / "o"),
                             "--set", "output.figure=false")
    assert code == 0, err
    lines = [line for line in err.splitlines() if "GMRES residual" in line]
    assert len(lines) == 11 and lines[0].strip().startswith("solve 1/11:") and "ETA" not in lines[0]
    assert all("| elapsed" in line and "ETA" in line for line in lines[1:]), lines
    assert "solve 1/11" not in out

    case = load_case(path, ['testfield.method="time"'])
    plan = plan_from_case(case)
    clock = iter(np.arange(0.0, 100.0, 1.0))
    updates = []
    progress = testfield_progress(case, plan, lambda p, force: updates.append(p), clock=lambda: float(next(clock)))
    C, p = 50.0, 1.5
    for t in (2.0, 4.0, 6.0, 8.0):
        progress(CalibrationProgress(f"t = {t:10.4g}   worst error / tolerance = {C * t ** -p:.3g}", time=t,
                                     worst_ratio=C * t ** -p))
    t_c = C ** (1 / p)
    last = updates[-1]
    assert last.until == "convergence" and last.fraction == pytest.approx(8.0 / t_c, rel=1e-9)
    assert last.eta == pytest.approx((t_c - 8.0) / ((8.0 - 2.0) / last.elapsed), rel=1e-9)
    assert last.line().startswith(last.text + " | elapsed") and "ETA" in last.line()
