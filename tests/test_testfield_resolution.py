"""The resolution check of ``kindyn testfield`` (both criteria, as a growth run has them).

Criteria (:mod:`kindyn.testfield.resolution`, :mod:`kindyn.diagnostics.resolution`): the test
solutions' spectrum at the dealiasing cut-off against ``run.resolution_threshold``, and the diffusive
scale ``k_cut l >= 1`` with ``l = sqrt(eta/|grad u|_rms)`` (the ``k_max eta_K >= 1`` rule of direct
simulations, Pope 2000, section 9.1.2: common practice).

Measured (Roberts flow, Rm = 12, direct steady solves, test fields K = 1 along z): eta_t = -0.00268 on
10 x 10 (cut-off ratio 0.45, k_cut l = 0.73: both criteria trip), 0.019355 on 24 x 24 (ratio 0.004,
k_cut l = 1.70: resolved), against 0.019355 converged; the coarse grid even gets the sign wrong.
"""

from __future__ import annotations

import json

import pytest

from kindyn.case import load_case
from kindyn.cli import main
from kindyn.errors import CaseError
from kindyn.output.netcdf import read_dataset
from tests.small_cases import RENOVATING_HELICAL

ROBERTS = """
[domain]
grid = [{n}, {n}, 4]
[flow]
type = "roberts"
[magnetic]
Rm = 12.0
[testfield]
modes = [1]
"""

RENOVATING = RENOVATING_HELICAL + "reset_interval = 2.0\n"


def _testfield(capsys, path, out, *extra):
    code = main(["testfield", str(path), "--out", str(out), "--quiet", *extra])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    return captured.out


@pytest.mark.parametrize("n, flagged", [(10, True), (24, False)])
def test_direct_testfield_on_a_coarse_grid_is_flagged(write_case, tmp_path, capsys, n, flagged):
    path = write_case(ROBERTS.format(n=n), f"roberts{n}.toml")
    data = json.loads(_testfield(capsys, path, tmp_path / "json", "--json"))
    assert data["resolution_warning"] is flagged
    assert data["resolution"]["resolution_warning"] is flagged
    under = [c for c in data["cautions"] if "under-resolved" in c]
    if flagged:
        assert data["resolution"]["resolution_flags"] == ["spectrum", "diffusive_scale"]
        assert data["resolution"]["diffusive_resolution"] < 1.0
        assert len(under) == 1 and "spectrum of the test solutions" in under[0] and "diffusive scale" in under[0]
    else:
        assert data["resolution"]["resolution_flags"] == [] and under == []
        assert data["resolution"]["diffusive_resolution"] >= 1.0
    text = _testfield(capsys, path, tmp_path / "text")
    assert ("possibly under-resolved" in text) is flagged
    attrs = read_dataset(tmp_path / "text" / f"roberts{n}-testfield.nc")["attributes"]
    assert ("possibly under-resolved" in attrs["caution"]) is flagged
    assert int(attrs["resolution_warning"]) == int(flagged)
    assert json.loads(attrs["resolution"])["resolution_warning"] is flagged


def test_time_stepped_testfield_is_flagged_on_a_coarse_grid():
    # the renovating case of tests/test_guards_and_errors.py: the full test solutions hold 14 % of
    # their peak shell energy at the cut-off of 8^3 (flagged), 0.5 % on 12^3 (resolved)
    from kindyn.testfield.calibration import calibrate

    coarse = calibrate(load_case("renovating8.toml", text=RENOVATING.format(n=8)))
    fine = calibrate(load_case("renovating12.toml", text=RENOVATING.format(n=12)))
    assert coarse.resolution["resolution_flags"] == ["spectrum"]
    assert any("under-resolved" in n and "test solutions" in n for n in coarse.notes)
    assert not fine.resolution["resolution_warning"]
    assert not any("under-resolved" in n for n in fine.notes)


def test_time_stepped_testfield_uses_the_run_scheme_for_its_stability_limit():
    # cfl = 1.5 is inside rk4's limit (2 sqrt 2) but rk2 (explicit midpoint) amplifies pure advection
    # at every step, |R(iy)|^2 = 1 + y^4/4; at this step's diffusion number eta/(dt U^2) its
    # damped limit is far below 1.5 (kindyn.stepping.tableaux), so the case is refused before computing
    from kindyn.testfield.calibration import calibrate

    with pytest.raises(CaseError, match="rk2 stability limit"):
        calibrate(load_case("renovating.toml", ["run.scheme=\"rk2\"", "run.cfl=1.5", "magnetic.eta=0.05", "testfield.samples_per_period=1"],
                            text=RENOVATING.format(n=8)))
