"""``kindyn closure``: mean-field growth rates from test-field coefficients beside direct runs across scales.

Reference: direct runs (``kindyn run``, the growth estimator's own error) in the boxes whose length along
z is 2 pi/K, for the 1:1:1 ABC flow (k = 1) in a box of L_z = 8 pi (K = 1/4, direct run in 8 pi) and
K = 1/2 (direct run in L_z = 4 pi).

Why the prediction from coefficients at the mode's own growth rate, with the mean-field harmonics of the
mode coupled, must equal the direct run: with B = Bbar + b, the planar mean and the fluctuation
equations are an exact split of the induction operator, and for a mode exp(p t) the fluctuation is
b = (p + eta k^2 - P N)^-1 P curl(u x Bbar), the test problem at growth rate p; the mean-field
eigenvalue problem over all harmonics K + j k of the mode is then the operator's own eigenproblem
(kindyn/testfield/memory.py). Steady coefficients (p = 0) leave out the memory effect of relative size
p/(eta (k^2 + K^2)) (Hubbard & Brandenburg 2009, ApJ 706, 712; recalled from memory), which is why the
classic formula p = |alpha(K)| K - (eta + eta_t(K)) K^2 misses the direct rate by ~3 % here (reported,
not hidden).
"""

from __future__ import annotations

import json
import math

import numpy as np

from kindyn.cli import main
from kindyn.output.netcdf import read_dataset

try:
    from tests.test_testfield_full_set import cf_errors
except ImportError:  # plain `pytest` with rootdir-relative imports
    from test_testfield_full_set import cf_errors

ABC_8PI = """
[domain]
grid = [8, 8, 32]
lengths = ["2*pi", "2*pi", "8*pi"]
[flow]
type = "abc"
[magnetic]
Rm = {Rm}
[run]
tolerance = 1e-6
[testfield]
modes = {modes}
onset_check = false
"""


def run_closure(write_case, tmp_path, capsys, Rm, modes, name):
    path = write_case(ABC_8PI.format(Rm=Rm, modes=list(modes)), f"{name}.toml")
    code = main(["closure", str(path), "--out", str(tmp_path / name), "--json", "--quiet"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    return json.loads(captured.out), tmp_path / name


def test_closure_across_scales_at_low_Rm(write_case, tmp_path, capsys):
    """Rm = 0.5, K = 1/4 (L_z = 8 pi) and 1/2 (L_z = 4 pi).

    * the prediction from the measured coefficients at the mode's own growth rate, harmonics coupled,
      agrees with the direct runs within 3 combined errors for every K;
    * the classic steady-coefficient formula departs by the memory effect (1 % to 5 %, both K; its
      sign: steady coefficients overestimate eta_t for a decaying mode);
    * SOCA departs from the direct run by the amount its coefficients imply, p_soca - p_full, within
      the errors (memory-consistent SOCA and full), and that departure is far outside the errors.
    The file passes the CF-1.8 checker; the figure is written."""
    data, out = run_closure(write_case, tmp_path, capsys, 0.5, (1, 2), "low")
    assert data["K"] == [0.25, 0.5] and data["flow_periods_in_box"] == 4
    direct, derr = np.array(data["direct_growth_rate"]), np.array(data["direct_growth_rate_error"])
    assert np.all(np.isfinite(direct)) and np.all(direct < 0)  # decaying mean-field modes at this Rm
    memory = data["predictions"]["memory"]
    assert memory["holds"] == [True, True], memory
    assert max(memory["difference_in_errors"]) <= 3.0
    steady = np.array(data["predictions"]["measured"]["relative_difference"])
    assert np.all((-0.05 < steady) & (steady < -0.01))
    soca, p_full = np.array(data["predictions"]["memory_soca"]["growth_rate"]), np.array(memory["growth_rate"])
    implied = soca - p_full
    combined = np.hypot(np.array(memory["error"]), derr)
    np.testing.assert_array_less(np.abs((soca - direct) - implied), 3 * combined + 1e-12)
    assert np.all(np.abs(soca - direct) > 100 * combined)
    assert cf_errors(out / "low-closure.nc") == []
    nc = read_dataset(out / "low-closure.nc")
    labels = [str(v) for v in nc["prediction_label"]] if nc["prediction_label"].dtype.kind in "OUS" else None
    assert nc["growth_rate"].shape == (7, 2) and nc["closure_holds"].dtype == np.int8
    assert (out / "low-closure.png").stat().st_size > 1000
    assert labels is None or "memory" in labels


def test_local_closure_is_reported_at_a_higher_Rm(write_case, tmp_path, capsys):
    """Rm = 3, K = 1/4 (a growing large-scale mode): the memory-consistent prediction still agrees with
    the direct run within its errors, and the text report shows how far the local (K -> 0) closure and the
    steady formula are off (numbers in the report, not asserted: there is no reference for them). The
    8 x 8 x 32 grid is coarse at Rm = 3 (the direct run's error includes its grid dependence, and the
    command says so), but both sides are the same discretisation, so the comparison is like for like."""
    path = write_case(ABC_8PI.format(Rm=3.0, modes=[1]), "high.toml")
    code = main(["closure", str(path), "--out", str(tmp_path / "high"), "--quiet"])
    out = capsys.readouterr().out
    assert code == 0
    local = [line for line in out.splitlines() if line.strip().startswith("local ") and "p = " in line]
    memory = [line for line in out.splitlines() if line.strip().startswith("memory ")]
    assert local and "relative difference" in local[0]
    assert memory and memory[0].rstrip().endswith("holds")
    assert "direct p = +0.1" in out  # growing
    nc = read_dataset(tmp_path / "high" / "high-closure.nc")
    rel = nc["relative_difference"][4, 0]  # local closure
    assert math.isfinite(rel) and abs(rel) > 0.01


def test_an_unconverged_calibration_gives_n_a_predictions_not_a_crash(write_case, tmp_path, capsys):
    """Time-stepped test fields stopped (testfield.max_time = 3) before a single averaging block: the
    coefficients are not available, so every prediction from them is n/a (NaN in JSON as null), the
    direct run still stands, and a caution says the calibration did not converge and names
    testfield.max_time (common practice: a quantity that cannot be computed is reported as not
    available, never as an internal error). Before, the eigen-solve of the mean-field matrix raised on
    the NaN tensors."""
    text = ABC_8PI.format(Rm=0.5, modes=[1]).replace('"8*pi"', '"4*pi"').replace("[8, 8, 32]", "[8, 8, 16]")
    text = text.replace("tolerance = 1e-6", "tolerance = 1e-2\nmax_time = 20.0") + 'method = "time"\nmax_time = 3.0\n'
    path = write_case(text, "short.toml")
    code = main(["closure", str(path), "--out", str(tmp_path / "short"), "--json", "--quiet"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    result = json.loads(captured.out)
    for name in ("measured", "measured_matrix", "soca", "soca_matrix", "local"):
        rates = result["predictions"][name]["growth_rate"]
        assert all(v is None or math.isnan(v) for v in rates), (name, rates)
    assert result["direct_growth_rate"][0] is not None and result["direct_growth_rate"][0] < 0
    assert any("did not converge" in c and "testfield.max_time" in c for c in result["cautions"]), result["cautions"]
