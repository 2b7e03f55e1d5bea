"""The notebook API (kindyn.api): cases from files, text and dicts, a Python function as the flow,
results with numbers as attributes, xarray equal to the command's netCDF file, the README's Python.

Physical reference: the 1:1:1 ABC flow at Rm = 12 is inside its first dynamo window (Arnold &
Korkina 1983; Galloway & Frisch 1986; recalled from memory), so gamma > 0; the README's numbers
for the shipped case (gamma = +0.00807 +- 0.00004, omega = 0.617729) are those of `kindyn run` and
must be what the library gives (to the printed digits). The Roberts (1972) flow written as a Python
function must give the eigenvalues of the built-in "roberts" flow (same velocity, exact to
round-off: common practice for two implementations of the same operator).
"""

from __future__ import annotations

import math
import re
import shutil
from pathlib import Path

import numpy as np
import pytest

import kindyn
from kindyn.cli import main
from kindyn.commands.common import with_error
from kindyn.errors import CaseError
from tests.small_cases import DECAYING_ABC

xr = pytest.importorskip("xarray")

ROOT = Path(__file__).resolve().parent.parent
CASES = ROOT / "cases"
README = ROOT / "README.md"

QUICK = DECAYING_ABC


def roberts(x, y, z, t):
    """The Roberts (1972) flow, form "sum", U = k = 1."""
    return np.cos(y), np.sin(x), np.cos(x) + np.sin(y)


@pytest.fixture(scope="module")
def abc_run():
    case = kindyn.load_case(CASES / "abc-first-window.toml")
    return case, kindyn.growth(case)


def readme_python_blocks() -> list[str]:
    return re.findall(r"^```python\n(.*?)^```", README.read_text(encoding="utf-8"), re.S | re.M)


def test_readme_python_snippets_run(tmp_path, monkeypatch, capsys):
    blocks = readme_python_blocks()
    assert len(blocks) >= 2, "README has an 'In a notebook' section with Python examples"
    shutil.copytree(CASES, tmp_path / "cases")
    monkeypatch.chdir(tmp_path)
    namespace: dict = {"__name__": "__main__"}
    for block in blocks:
        exec(compile(block, str(README), "exec"), namespace)  # noqa: S102 -- the README's own code
    out = capsys.readouterr().out
    assert "growth rate gamma = +0.00807 +- 0.00004" in out
    assert (tmp_path / "abc-first-window.pdf").read_bytes()[:5] == b"%PDF-"


def test_the_shipped_case_through_the_api_equals_the_command_file(abc_run, tmp_path, capsys):
    case, run = abc_run
    assert run.converged is True and run.estimate.converged and run.growth_rate > 0
    assert capsys.readouterr().out == ""  # nothing printed unless asked
    ds = run.to_xarray()
    assert main(["run", str(CASES / "abc-first-window.toml"), "--out", str(tmp_path), "--quiet"]) == 0
    capsys.readouterr()
    with xr.open_dataset(tmp_path / "abc-first-window.nc") as cli:
        cli = cli.load()
    assert sorted(ds.variables) == sorted(cli.variables)
    assert sorted(ds.coords) == sorted(cli.coords) and dict(ds.sizes) == dict(cli.sizes)
    for name in ds.variables:  # same process, same FFTW plans and kernels: equal, bit for bit
        assert ds[name].dims == cli[name].dims, name
        np.testing.assert_array_equal(ds[name].values, cli[name].values, err_msg=name)
        assert ds[name].attrs == cli[name].attrs, name
    differ = {key for key in set(ds.attrs) | set(cli.attrs) if ds.attrs.get(key) != cli.attrs.get(key)}
    assert differ == {"history", "kindyn_command", "result_wall_seconds"}, differ
    assert ds.attrs["kindyn_command"] == "kindyn.api.growth (Python)"
    assert cli.attrs["kindyn_command"].startswith("kindyn run ")
    assert ds.attrs["case_text"] == (CASES / "abc-first-window.toml").read_text(encoding="utf-8")


def test_the_readme_numbers_are_the_library_numbers(abc_run):
    case, run = abc_run
    readme = README.read_text(encoding="utf-8")
    gamma = with_error(run.growth_rate, run.growth_rate_error, sign=True)
    omega = f"{run.frequency:.6g}"
    assert gamma == "+0.00807 +- 0.00004" and f"growth rate gamma = {gamma}, frequency omega = {omega}" in readme
    assert f"{run.steps} steps" in readme and f"t = {run.outcome.time:.5g}" in readme
    # the notebook section's printed line, to the digits shown there
    shown = re.search(r"prints `([-0-9.e+]+) ([-0-9.e+]+) ([-0-9.e+]+) (True|False)`", readme)
    assert shown, "the notebook section shows what the first example prints"
    for text, value in zip(shown.groups()[:3], (run.growth_rate, run.growth_rate_error, run.frequency)):
        mantissa = text.lower().split("e")[0].lstrip("+-").replace(".", "").lstrip("0")
        assert f"{value:.{max(len(mantissa), 1)}g}" == text, (text, value)
    assert shown.group(4) == str(run.converged)


def test_results_have_the_numbers_text_figure_and_file(abc_run, tmp_path):
    case, run = abc_run
    assert run.growth_rate == run.summary["growth_rate"] and run.cautions == run.summary["cautions"]
    assert "growth_rate" in dir(run) and run.Rm == pytest.approx(12.0)
    assert str(run).startswith("growth rate gamma = +0.00807 +- 0.00004")
    path = run.to_netcdf(tmp_path / "api.nc")
    with xr.open_dataset(path) as ds:
        assert ds.attrs["result_converged"] == 1
    figure = run.figure(tmp_path / "api.svg", size=(3.5, 2.5))
    assert figure.read_text(encoding="utf-8").lstrip().startswith("<?xml")


def test_text_dict_and_overrides_make_the_same_case(tmp_path, write_case):
    path = write_case(QUICK, "quick.toml")
    from_file = kindyn.load_case(path, overrides=["run.tolerance=1e-3"])
    from_text = kindyn.load_case(QUICK, overrides={"run.tolerance": 1e-3})
    from_dict = kindyn.load_case({"domain": {"grid": [8, 8, 8]}, "flow": {"type": "abc"},
                                  "magnetic": {"Rm": 4.0, "initial_field": "flow"},
                                  "numerics": {"planning": "estimate"}, "run": {"tolerance": 1e-3}})
    for case in (from_text, from_dict):
        assert case.name == "case" and case.run.tolerance == 1e-3 and case.Rm == 4.0
        assert case.resolved["run"] == from_file.resolved["run"] and case.resolved["flow"] == from_file.resolved["flow"]
    assert from_dict.text.startswith("[domain]\ngrid = [8, 8, 8]")
    assert kindyn.load_case(from_dict.text).resolved == from_dict.resolved  # the recorded text loads back
    run = kindyn.growth(from_dict)
    assert run.growth_rate == pytest.approx(-0.25, abs=1e-9)  # B = u decays as exp(-eta t), eta = 1/4


def test_growth_cautions_carry_the_diffusive_scale_criterion():
    """ABC at Rm = 4 on 8^3: k_cut l = 2 sqrt(eta/sqrt 3) = 0.76 < 1 (the criterion of
    kindyn.diagnostics.resolution); with run.resolution_threshold = 0.5 the spectrum criterion does not
    trip, so the caution must name the diffusive scale only, as ``kindyn run`` does."""
    run = kindyn.growth(kindyn.load_case(QUICK, overrides={"run.resolution_threshold": 0.5,
                                                           "run.tolerance": 1e-3}))
    assert run.summary["resolution_flags"] == ["diffusive_scale"]
    (caution,) = [c for c in run.cautions if "under-resolved" in c or "diffusive scale" in c]
    assert "diffusive scale" in caution and "at the dealiasing cut-off" not in caution


def test_case_errors_name_file_key_value_and_expected():
    with pytest.raises(CaseError) as info:
        kindyn.load_case({"domain": {"grid": [8, 8, 8]}, "flow": {"type": "abc"}, "magnetic": {"Rm": -1.0}})
    assert (info.value.file, info.value.key, info.value.value) == ("<dict>", "magnetic.Rm", -1.0)
    with pytest.raises(CaseError) as info:
        kindyn.load_case(QUICK, overrides=["run.cfl=-1"])
    assert info.value.key == "run.cfl"
    with pytest.raises(CaseError) as info:
        kindyn.load_case(QUICK.replace('"abc"', '"roberts"'), flow=roberts)
    assert info.value.key == "flow.type"


def test_a_python_function_is_the_flow(tmp_path):
    table = {"domain": {"grid": [16, 16, 4]}, "magnetic": {"eta": 0.2}, "modes": {"count": 2, "kz": [0.5, 1.0]}}
    own = kindyn.load_case({**table, "flow": {"U": 1.0, "k_f": 1.0, "steady": True}}, flow=roberts, name="own")
    builtin = kindyn.load_case({**table, "flow": {"type": "roberts"}}, name="builtin")
    assert own.flow_type == "callable" and "roberts" in str(own.flow.function)
    mine, reference = kindyn.eigenmodes(own), kindyn.eigenmodes(builtin)
    np.testing.assert_allclose(mine.eigenvalues, reference.eigenvalues, rtol=0, atol=1e-9)
    assert mine.growth_rate > 0  # Roberts flow at eta = 0.2, kz = 0.5: a dynamo (Roberts 1972)
    ds = mine.to_xarray()
    np.testing.assert_array_equal(ds["growth_rate"].values, [g for g, _ in mine.eigenvalues])
    # the file names the function (importable here: "module:name", which a case file can load too)
    assert "python:" in ds.attrs["case_resolved"] and ":roberts\"" in ds.attrs["case_text"]
    # identity: the same function gives the same fingerprint, a different one another
    again = kindyn.load_case({**table, "flow": {"U": 1.0, "k_f": 1.0, "steady": True}}, flow=roberts, name="own")
    assert again.fingerprint == own.fingerprint

    def shifted(x, y, z, t):
        return np.cos(y + 0.5), np.sin(x), np.cos(x) + np.sin(y + 0.5)

    other = kindyn.load_case({**table, "flow": {"U": 1.0, "k_f": 1.0, "steady": True}}, flow=shifted, name="own")
    assert other.fingerprint != own.fingerprint
    # checked like every user flow: a function the grid cannot represent is refused before any run
    with pytest.raises(CaseError) as info:
        kindyn.load_case({**table, "flow": {"U": 1.0, "k_f": 1.0, "steady": True}},
                         flow=lambda x, y, z, t: (np.sin(9 * y), 0 * x, 0 * x))
    assert info.value.key == "domain.grid" and "28 points along y" in str(info.value)  # 3 m + 1 for m = 9


def test_progress_reaches_a_callback_with_an_eta():
    case = kindyn.load_case({"domain": {"grid": [16, 16, 4]}, "magnetic": {"eta": 0.2},
                             "modes": {"count": 2, "kz": [0.5, 1.0, 1.5]}, "flow": {"type": "roberts"}})
    updates = []
    kindyn.eigenmodes(case, progress=updates.append)
    assert [u.text.strip()[:10] for u in updates] == ["solve 1/3:", "solve 2/3:", "solve 3/3:"]
    assert updates[0].eta is None and updates[1].eta is not None and updates[2].fraction == pytest.approx(2 / 3)
    assert all(u.line().startswith(u.text + " | elapsed") for u in updates)


def test_growth_eta_finds_the_convergence_time_of_a_power_law():
    # error(t) = C t^-p reaches the tolerance at t_c = (C / tol)^(1/p), exactly (the fit is exact
    # for a power law); at simulated speed 2 per second the ETA is (t_c - t)/2 seconds
    from kindyn.commands.progress import GrowthEta

    clock = iter(np.arange(0.0, 100.0, 1.0))
    eta = GrowthEta(tolerance=1e-4, max_time=1e6, clock=lambda: float(next(clock)))
    C, p = 0.5, 1.5
    result = None
    for t in (2.0, 4.0, 6.0, 8.0):
        result = eta.observe(t, C * t ** -p)
    t_c = (C / 1e-4) ** (1 / p)
    elapsed, remaining, fraction, until = result
    assert until == "convergence" and fraction == pytest.approx(8.0 / t_c, rel=1e-12)
    assert remaining == pytest.approx((t_c - 8.0) / ((8.0 - 2.0) / elapsed), rel=1e-12)
    stalled = GrowthEta(tolerance=1e-4, max_time=100.0, clock=lambda: float(next(clock)))
    for t in (2.0, 4.0, 6.0):
        result = stalled.observe(t, 0.1)  # an error that does not fall: the run will stop at max_time
    assert result[3] == "max_time"


def test_flow_statistics_and_its_file(tmp_path):
    case = kindyn.load_case(QUICK)
    flow = kindyn.flow_statistics(case)
    assert flow.u_rms == pytest.approx(math.sqrt(3.0), rel=1e-12)  # ABC, A = B = C = 1: <|u|^2> = 3
    assert flow.velocity.shape == (3, 8, 8, 8)
    ds = flow.to_xarray()
    assert set(ds.data_vars) >= {"ux", "uy", "uz", "energy_spectrum", "helicity_spectrum"}
    assert float(ds["energy_spectrum"].sum()) == pytest.approx(1.5, rel=1e-12)


def test_a_run_that_resumes_from_a_checkpoint_says_so(tmp_path, write_case, capsys):
    from kindyn.output.checkpoint import Checkpoint
    from kindyn.run import run_growth

    path = write_case(QUICK.replace('initial_field = "flow"', 'initial_field = "random"')
                      + "[run]\nmax_time = 3.0\ncheckpoint_seconds = 1e-9\n", "resume.toml")
    case = kindyn.load_case(path)
    out = tmp_path / "out"
    run_growth(case, checkpoint=Checkpoint(out / "resume.checkpoint.nc"))  # as a killed run leaves it
    assert (out / "resume.checkpoint.nc").exists()
    assert main(["run", str(path), "--out", str(out), "--quiet", "--json"]) == 0
    captured = capsys.readouterr()
    assert "kindyn run: note: resuming from the checkpoint" in captured.err  # also with --quiet
    assert '"resumed": true' in captured.out and not (out / "resume.checkpoint.nc").exists()


CLOSURE = """\
[domain]
grid = [8, 8, 16]
lengths = ["2*pi", "2*pi", "4*pi"]
[flow]
type = "abc"
[magnetic]
Rm = 0.5
[run]
tolerance = 1e-5
[testfield]
modes = [1]
onset_check = false
[output]
figure = false
"""


def test_closure_through_the_api_equals_the_command(tmp_path, write_case, capsys):
    """Common practice (two entry points of one computation): kindyn.closure gives the numbers, text and
    file of `kindyn closure` on the same case (the command itself is checked against direct runs in
    tests/test_testfield_scales.py); the same process, so equal to round-off of the measured choices
    (FFTW plans, kernel threads) only."""
    import json

    path = write_case(CLOSURE, "scales.toml")
    result = kindyn.closure(kindyn.load_case(path))
    assert capsys.readouterr().out == ""  # nothing printed unless asked
    assert main(["closure", str(path), "--out", str(tmp_path / "o"), "--json", "--quiet"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert result.K == data["K"] == [0.5]
    np.testing.assert_allclose(result.direct_growth_rate, data["direct_growth_rate"], rtol=1e-6)
    for name, prediction in data["predictions"].items():
        np.testing.assert_allclose(result.predictions[name]["growth_rate"], prediction["growth_rate"], rtol=1e-6,
                                   err_msg=name)
    assert result.predictions["memory"]["holds"] == data["predictions"]["memory"]["holds"] == [True]
    assert result.cautions == data["cautions"] and str(result).splitlines()[0].startswith("scales: abc flow")
    ds = result.to_xarray()
    with xr.open_dataset(tmp_path / "o" / "scales-closure.nc") as cli:
        cli = cli.load()
    assert sorted(ds.variables) == sorted(cli.variables) and dict(ds.sizes) == dict(cli.sizes)
    np.testing.assert_allclose(ds["growth_rate"].values, cli["growth_rate"].values, rtol=1e-6)
    assert ds.attrs["kindyn_command"] == "kindyn.api.closure (Python)"
    assert result.figure(tmp_path / "scales.svg").read_text(encoding="utf-8").lstrip().startswith("<?xml")


def test_a_sweep_from_a_dict_gives_the_derived_decay_rates(tmp_path):
    """Derived (tests/small_cases.py): with B = u for the 1:1:1 ABC flow, u x B = 0 and Lap B = -B,
    so gamma = -eta = -1/Rm at every Rm, on any grid that holds k = 1. ``parameter_sweep`` on a dict
    writes the case it ran (atomically, never half-written) and gives those rates; a dict whose
    ``output.name`` is not a plain file name is a one-line case error naming ``output.name``."""
    import tomllib

    source = tomllib.loads(QUICK + '[run]\ntolerance = 1e-3\n[output]\nname = "decay"\nfigure = false\n'
                           '[sweep]\n"magnetic.Rm" = [2.0, 4.0]\n')
    result = kindyn.parameter_sweep(source, out=tmp_path / "out", workers=1, figure=False)
    written = tmp_path / "out" / "decay-sweep-case.toml"
    assert tomllib.loads(written.read_text(encoding="utf-8")) == source
    assert not list((tmp_path / "out").glob("*.part"))
    rates = {p["magnetic.Rm"]: p for p in result.points}
    assert set(rates) == {2.0, 4.0}
    for rm, point in rates.items():
        assert point["growth_rate"] == pytest.approx(-1.0 / rm, abs=max(3 * point["growth_rate_error"], 1e-9))
    bad = {**source, "output": {"name": "../elsewhere", "figure": False}}
    with pytest.raises(CaseError) as info:
        kindyn.parameter_sweep(bad, out=tmp_path / "out2", workers=1)
    assert (info.value.file, info.value.key) == ("<dict>", "output.name")
    assert not (tmp_path / "elsewhere-sweep-case.toml").exists()
