"""``kindyn flow`` (flow diagnostics, SOCA numbers) and ``kindyn ensemble`` through the CLI."""

from __future__ import annotations

import json
import math
import textwrap

import netCDF4
import numpy as np
import pytest

from kindyn.cli import main

ABC_FORMULA = """type = "formula"
ux = "A*sin(k*z) + C*cos(k*y)"
uy = "B*sin(k*x) + A*cos(k*z)"
uz = "C*sin(k*y) + B*cos(k*x)"
U = 1.0
k_f = 1.0
[flow.parameters]
A = 1.0
B = 1.0
C = 1.0
k = 1.0"""


def write_case(tmp_path, flow, grid=(8, 8, 8), eta=0.25, extra="", name="case"):
    path = tmp_path / f"{name}.toml"
    path.write_text(textwrap.dedent(f"""\
        [domain]
        grid = {list(grid)}
        [magnetic]
        eta = {eta}
        {extra}
        [flow]
        """) + flow + "\n")
    return path


def flow_json(capsys, path, out, *options):
    code = main(["flow", str(path), "--out", str(out), "--json", *options])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    return json.loads(captured.out)


@pytest.mark.parametrize("flow", ['type = "abc"', ABC_FORMULA])
def test_soca_numbers_for_abc(tmp_path, capsys, flow):
    # ABC with A = B = C = 1, k = 1 is Beltrami (curl u = u), <u^2> = 3, <u.omega> = 3, so by hand
    # alpha = -<u.omega>/(3 eta k^2) = -1/eta and eta_t = <u^2>/(3 eta k^2) = 1/eta (Moffatt 1978,
    # Magnetic Field Generation in Electrically Conducting Fluids, CUP, ch. 7; design.md 1).
    eta = 0.25
    data = flow_json(capsys, write_case(tmp_path, flow, eta=eta), tmp_path / "out")
    assert math.isclose(data["alpha_soca"], -1 / eta, rel_tol=1e-12)
    assert math.isclose(data["eta_t_soca"], 1 / eta, rel_tol=1e-12)
    assert math.isclose(data["helicity"], 3.0, rel_tol=1e-12)
    assert math.isclose(data["relative_helicity"], 1.0, rel_tol=1e-12)
    assert math.isclose(data["u_rms"], math.sqrt(3), rel_tol=1e-12)
    assert math.isclose(data["max_speed"], math.sqrt(6), rel_tol=0.02)   # max |u|^2 = 6 (by hand), on the grid
    assert data["divergence"] < 1e-14
    assert (data["U"], data["k_f"], data["eta"]) == (1.0, 1.0, eta)
    assert math.isclose(data["Rm"], 1 / eta) and data["soca_applies"] is True
    for key in ("u_rms", "helicity", "relative_helicity", "divergence", "U", "k_f", "Rm", "eta",
                "alpha_soca", "eta_t_soca"):
        assert key in data
    assert any("Rm << 1" in c for c in data["cautions"])   # Rm = 4: SOCA out of its range


def test_flow_file_holds_spectra_and_reads_back_as_a_velocity_file(tmp_path, capsys):
    case = write_case(tmp_path, 'type = "random-helical"\nk_min = 1\nk_max = 3\nsigma = 0.7\nseed = 5',
                      grid=(12, 12, 12), name="turb")
    data = flow_json(capsys, case, tmp_path / "out")
    nc = tmp_path / "out" / "turb-flow.nc"
    assert (tmp_path / "out" / "turb-flow.png").stat().st_size > 1000
    with netCDF4.Dataset(nc) as ds:
        E, H = ds["energy_spectrum"][:], ds["helicity_spectrum"][:]
        u = np.stack([ds[n][:] for n in ("ux", "uy", "uz")])
    # Parseval: sum E_s = <|u|^2>/2 and sum H_s = <u.omega> (here <u.omega> from grid derivatives)
    assert math.isclose(E.sum(), 0.5 * data["u_rms"] ** 2, rel_tol=1e-12)
    assert math.isclose(H.sum(), data["helicity"], rel_tol=1e-12)
    assert math.isclose(data["u_rms"], 1.0, rel_tol=1e-12)
    # the written file is a valid velocity-file flow with the same statistics
    copy = write_case(tmp_path, 'type = "velocity-file"\nfile = "out/turb-flow.nc"', grid=(12, 12, 12), name="copy")
    again = flow_json(capsys, copy, tmp_path / "out2")
    for key in ("u_rms", "helicity", "relative_helicity", "alpha_soca", "eta_t_soca"):
        assert math.isclose(again[key], data[key], rel_tol=1e-12), key
    assert np.isfinite(u).all()


@pytest.mark.parametrize("flow, kind, tau", [
    ('type = "galloway-proctor"', "periodic", None),
    ('type = "random-helical"\nk_min = 1\nk_max = 2\ntime_dependence = "ornstein-uhlenbeck"\ntau = 0.4',
     "correlated", 0.4),
    ('type = "random-helical"\nk_min = 1\nk_max = 2\ntime_dependence = "renovating"\ntau = 0.4',
     "renovating", 0.2),
])
def test_time_dependent_flows_get_no_steady_soca_numbers(tmp_path, capsys, flow, kind, tau):
    data = flow_json(capsys, write_case(tmp_path, flow), tmp_path / "out")
    assert data["time_dependence"] == kind
    assert data["alpha_soca"] is None and data["eta_t_soca"] is None and data["soca_applies"] is False
    assert data["correlation_time"] == tau
    assert any("do not apply" in c for c in data["cautions"])


def test_human_output_names_the_numbers(tmp_path, capsys):
    code = main(["flow", str(write_case(tmp_path, 'type = "abc"')), "--out", str(tmp_path / "o")])
    out = capsys.readouterr().out
    assert code == 0 and "alpha = -4" in out and "eta_t = 4" in out and "Rm = U/(eta k_f) = 4" in out


def test_results_on_stdout_progress_on_stderr_quiet_and_json(tmp_path, capsys):
    """Common practice (README "Commands", the convention of every command): results and cautions on
    stdout, progress on stderr and silenced by --quiet (never the results); with --json stdout is one
    JSON object and each caution is in it and on stderr."""
    case = write_case(tmp_path, 'type = "abc"')  # eta = 1/4: Rm = 4, so SOCA is out of its range (a caution)
    assert main(["flow", str(case), "--out", str(tmp_path / "o")]) == 0
    plain = capsys.readouterr()
    assert "u_rms = 1.73205" in plain.out and "SOCA: alpha = -4" in plain.out
    assert "caution: SOCA (first-order smoothing) holds for Rm << 1" in plain.out
    assert "wrote " in plain.out and "case-flow.nc" in plain.out
    assert "u_rms" not in plain.err and "caution" not in plain.err and "kindyn flow" in plain.err
    assert main(["flow", str(case), "--out", str(tmp_path / "o"), "--quiet"]) == 0
    quiet = capsys.readouterr()
    assert quiet.err == "" and quiet.out == plain.out
    assert main(["flow", str(case), "--out", str(tmp_path / "o"), "--json", "--quiet"]) == 0
    captured = capsys.readouterr()
    data = json.loads(captured.out)
    assert data["cautions"] and all(f"kindyn flow: caution: {c}" in captured.err for c in data["cautions"])
    assert "u_rms" not in captured.err and data["output"].endswith("case-flow.nc")


def test_ensemble_of_a_renovating_flow(tmp_path, capsys):
    case = write_case(tmp_path, 'type = "random-helical"\nk_min = 1\nk_max = 2\nsigma = 1.0\nseed = 20\n'
                      'time_dependence = "renovating"\ntau = 1.0', eta=0.2,
                      extra="[run]\ntolerance = 0.05\nmax_time = 60.0\n[output]\nfigure = false", name="ens")
    code = main(["ensemble", str(case), "--count", "3", "--out", str(tmp_path / "out"), "--json", "--quiet"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    data = json.loads(captured.out)
    rates = []
    for seed in (20, 21, 22):
        with netCDF4.Dataset(tmp_path / "out" / f"ens-seed{seed}.nc") as ds:
            rates.append(float(ds.getncattr("result_growth_rate")))
            assert ds.getncattr("flow_seed") == seed
            # the run used the stochastic estimator (renewal-time samples, block errors)
            assert "block" in ds.getncattr("result_note") or "blocks" in ds.getncattr("result_note")
    assert len(set(rates)) == 3                              # different flows, different rates
    assert [m["seed"] for m in data["members"]] == [20, 21, 22]
    assert math.isclose(data["mean_growth_rate"], np.mean(rates), rel_tol=1e-12)
    assert math.isclose(data["spread"], np.std(rates, ddof=1), rel_tol=1e-12)
    assert math.isclose(data["standard_error"], np.std(rates, ddof=1) / math.sqrt(3), rel_tol=1e-12)
    with netCDF4.Dataset(tmp_path / "out" / "ens-ensemble.nc") as ds:
        np.testing.assert_allclose(ds["growth_rate"][:], rates, rtol=1e-12)


def test_ensemble_needs_a_random_flow(tmp_path, capsys):
    code = main(["ensemble", str(write_case(tmp_path, 'type = "abc"')), "--count", "2",
                 "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err.strip()
    assert code == 2 and len(err.splitlines()) == 1 and "random flow with a seed" in err
