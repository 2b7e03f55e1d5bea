"""Test-field ensembles of a random flow through the sweep machinery (kindyn/testfield/ensemble.py,
kindyn/sweep/testfield_ensemble.py).

References: the statistics of a mean of N independent samples (its standard error falls as 1/sqrt(N);
the sample variance of N Gaussian values is sigma^2 chi^2_{N-1}/(N-1)), and an independent long time
average of one realisation of the same renovating flow (for a renovating flow, one realisation's time
average over many renewals is itself an average over independent draws, so it estimates the same
ensemble mean).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from kindyn.case import load_case
from kindyn.cli import main
from kindyn.output.netcdf import read_dataset
from kindyn.testfield.calibration import calibrate
from kindyn.testfield.ensemble import combine

RENOVATING = """
[domain]
grid = [8, 8, 8]
[flow]
type = "random-helical"
k_min = 1.0
k_max = 1.8
sigma = 1.0
seed = 5
time_dependence = "renovating"
tau = 1.0
[magnetic]
Rm = 1.0
[run]
time_step = 0.0625
[testfield]
modes = [1]
uniform = false
block_length = 2.0
samples_per_period = 16
settle_time = 6.0
tolerance = 1e-12
max_time = 14.0
[output]
figure = false
"""
DIAGONAL = ((0, 0, 0), (0, 1, 1))  # alpha_xx(K), alpha_yy(K) (and the same for eta)


def test_combined_standard_error_formula():
    """SE = sqrt(max(s^2, mean e^2)/N) (kindyn/testfield/ensemble.py): spread-dominated, block-dominated
    and N = 1 cases, by hand."""
    values = np.array([1.0, 2.0, 3.0, 4.0])
    c = combine(values, np.full(4, 0.1))
    s2 = np.var(values, ddof=1)
    assert c["standard_error"] == pytest.approx(math.sqrt(s2 / 4)) and c["mean"] == 2.5
    assert c["intrinsic_spread"] == pytest.approx(math.sqrt(s2 - 0.01))
    c = combine(np.array([1.0, 1.0 + 1e-9]), np.array([0.5, 0.5]))
    assert c["standard_error"] == pytest.approx(0.5 / math.sqrt(2)) and c["intrinsic_spread"] == 0.0
    assert combine(np.array([3.0]), np.array([0.2]))["standard_error"] == pytest.approx(0.2)


def test_ensemble_error_falls_as_one_over_sqrt_N_and_matches_a_long_run(write_case, tmp_path, capsys):
    """Renovating helical flow (tau = 1, Rm = 1, 8^3), z averages at K = 1, each realisation averaged over
    4 blocks of 2 renewals after settling. N = 4 and N = 16 realisations (flow seeds 5, 6, ...; the first
    four reused by the second command, as points of the sweep machinery on 2 local workers).

    1/sqrt(N): the expected SE ratio is 1/2; the estimate of each SE comes from a spread with 3 and 15
    degrees of freedom (floored by the block variances), so the ratio lies in [0.25, 0.75] with about
    95 % probability per component (chi^2 quantiles: 0.5 sqrt(1/3.1) .. 0.5 sqrt(1.8), widened for the
    noise of the block variances); checked for alpha_xx, alpha_yy, eta_xx, eta_yy and for their mean
    ratio within [0.35, 0.65]. The N = 16 mean agrees with a single realisation (seed 100) averaged over
    64 blocks within 3 combined standard errors."""
    path = write_case(RENOVATING, "rh.toml")
    out = tmp_path / "o"
    results = {}
    for n in (4, 16):
        code = main(["testfield", str(path), "--out", str(out), "--set", f"testfield.realisations={n}",
                     "--workers", "2", "--json", "--quiet"])
        captured = capsys.readouterr()
        assert code == 0, captured.err
        results[n] = json.loads(captured.out)
    assert results[16]["ensemble"]["count"] == 16 and results[16]["ensemble"]["seeds"][:4] == [5, 6, 7, 8]
    long = calibrate(load_case(str(path), ["flow.seed=100", "testfield.max_time=134.0"]))
    ratios = []
    for name in ("alpha_K", "eta_K"):
        for idx in DIAGONAL:
            se4 = np.array(results[4][name + "_error"], float)[idx]
            se16 = np.array(results[16][name + "_error"], float)[idx]
            ratios.append(se16 / se4)
            assert 0.25 <= se16 / se4 <= 0.75, (name, idx, se4, se16)
            mean16 = np.array(results[16][name], float)[idx]
            value, error = long.tensors[name][idx], long.errors[name][idx]
            assert abs(mean16 - value) <= 3 * math.hypot(se16, error), (name, idx, mean16, se16, value, error)
    assert 0.35 <= float(np.mean(ratios)) <= 0.65, ratios
    nc = read_dataset(out / "rh-testfield.nc")
    assert nc["member_alpha_K"].shape == (16, 1, 3, 2)
    np.testing.assert_array_equal(nc["member_flow_seed"], np.arange(5, 21))
    np.testing.assert_allclose(nc["alpha_K"], nc["member_alpha_K"].mean(axis=0), rtol=1e-12)
    assert "sqrt(max(s^2" in nc["attributes"]["ensemble"]


def test_an_ensemble_is_flagged_as_its_members_are(write_case, tmp_path, capsys):
    """The resolution of an ensemble is that of its realisations (common practice: a mean over
    members is no better resolved than its worst member). On 12^3 (K = 1, Rm = 1) the test solutions'
    spectra at the cut-off are about 0.014-0.022 of their peaks; with ``run.resolution_threshold =
    0.02`` some realisations trip the criterion and some do not. The ensemble of seeds 5, 6, 7 is
    flagged exactly for the seeds whose own calibration (run here independently, one realisation
    each) is flagged, its cut-off ratio is their largest, its point records and netCDF file say so,
    and its cautions hold one resolution caution (not one per member)."""
    path = write_case(RENOVATING.replace("grid = [8, 8, 8]", "grid = [12, 12, 12]")
                      .replace("[run]\n", "[run]\nresolution_threshold = 0.02\n"), "rh.toml")
    own = {seed: calibrate(load_case(str(path), [f"flow.seed={seed}"])).resolution for seed in (5, 6, 7)}
    flagged = sorted(s for s, res in own.items() if res["resolution_warning"])
    assert 0 < len(flagged) < 3, own  # the point of the test: a mixed ensemble
    out = tmp_path / "o"
    code = main(["testfield", str(path), "--out", str(out), "--set", "testfield.realisations=3",
                 "--workers", "1", "--json", "--quiet"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    result = json.loads(captured.out)
    assert result["resolution_warning"] is True
    assert result["resolution"]["flagged_seeds"] == flagged
    assert result["resolution"]["cutoff_ratio"] == max(res["cutoff_ratio"] for res in own.values())
    under = [c for c in result["cautions"] if c.startswith("possibly under-resolved")]
    assert len(under) == 1 and f"{len(flagged)} of 3 realisation(s)" in under[0], result["cautions"]
    records = [json.loads(p.read_text()) for p in out.glob("*/points/*.json")]
    assert sorted(r["flow_seed"] for r in records) == [5, 6, 7]
    records = {r["flow_seed"]: r for r in records}
    assert {s for s, r in records.items() if r["resolution_warning"]} == set(flagged)
    nc = read_dataset(out / "rh-testfield.nc")
    assert nc["attributes"]["resolution_warning"] == 1
    assert json.loads(nc["attributes"]["resolution"])["flagged_seeds"] == flagged
