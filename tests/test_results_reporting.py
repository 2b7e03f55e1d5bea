"""Results where a user looks for them (issue 12, section 5).

1. Every command (run, ensemble, modes, testfield, sweep) prints its results and cautions on stdout,
   progress on stderr; ``--quiet`` silences progress only; ``--json`` keeps stdout to exactly one
   JSON object (cautions in it and on stderr), even when a user flow module prints on import.
2. A run that stops before any error estimate exists says "not converged, no estimate yet" (text)
   and reports null growth rate, error and frequency (JSON), exit code 0.
3. ``kindyn ensemble`` carries its members' resolution warnings into its summary (text, JSON, netCDF).
4. ``kindyn sweep`` prints an uncertain sign change as uncertain; an invalid swept value is a case
   error (exit 2) naming the swept key, before any point runs.
5. ``kindyn testfield`` shows the uniform alpha tensor, the off-diagonal terms and every coefficient
   with its error; the closure line is rounded to its error.
6. The Lorentzian kernel fit uses the uniform-field alpha at K = 0 (checked against the SOCA closed
   form of the ABC flow, derived in tests/test_testfield_abc.py: in-plane SOCA
   ``alpha(K) = -(B^2 + C^2) k / (2 eta (k^2 + K^2))``, so ``c_0 = -(B^2 + C^2)/(2 eta k)`` -- the
   uniform-field value -- and ``k_c = k``; and against synthetic Lorentzians with known c_0, k_c).

Reference values: exact solutions (ABC flow with B(0) = u decays as exp(-eta t), derived in
tests/test_exact_solutions.py), the SOCA closed forms above, and arithmetic on the printed numbers.
Runtime: about 40 s on 2 shared cores.
"""

from __future__ import annotations

import json
import math
import os
import re
import subprocess
import sys
import textwrap
from types import SimpleNamespace

import numpy as np
import pytest

from kindyn.case import load_case
from kindyn.cli import main
from kindyn.output.netcdf import read_dataset
from kindyn.testfield.calibration import TestFieldResult, calibrate
from kindyn.testfield.kernels import fit_lorentzian
from tests.small_cases import DECAYING_ABC, NO_FIGURE

QUICK = DECAYING_ABC + NO_FIGURE

COARSE = QUICK.replace('initial_field = "flow"', 'initial_field = "random"\nseed = 3').replace(
    "Rm = 4.0", "Rm = 20.0") + "[run]\nmax_time = 20.0\n"  # under-resolved on 8^3 (test_run_output.py)

RANDOM = """\
[domain]
grid = [12, 12, 12]
[flow]
type = "random-helical"
spectrum = "power-law"
k_min = 1.0
k_max = 3.0
slope = -1.6666666667
sigma = 0.8
u_rms = 1.0
seed = 31
time_dependence = "ornstein-uhlenbeck"
tau = 0.5
[magnetic]
Rm = {Rm}
seed = 3
[run]
tolerance = 0.005
max_time = {max_time}
[numerics]
planning = "estimate"
[output]
figure = false
"""

MODES = """\
[domain]
grid = [8, 8, 8]
[flow]
type = "abc"
[magnetic]
Rm = 4.0
[modes]
count = 2
[numerics]
planning = "estimate"
[output]
figure = false
"""

TESTFIELD_ABC = """\
[domain]
grid = [12, 12, 12]
[flow]
type = "abc"
[magnetic]
Rm = 2.0
[testfield]
modes = [1, 2]
[output]
figure = false
"""

GP = """\
[domain]
grid = [8, 8, 4]
[flow]
type = "galloway-proctor"
[magnetic]
Rm = 1.0
[testfield]
modes = [1]
max_time = 40.0
tolerance = 1e-12
[output]
figure = false
"""

# 12^3: 8^3 does not resolve the leading mode at Rm = 3 and 4 (diffusive scale k_cut l = 0.88, 0.76 < 1;
# kindyn.diagnostics.resolution), and the points would read "possibly under-resolved"
SWEEP = QUICK.replace("grid = [8, 8, 8]", "grid = [12, 12, 12]") + '[sweep]\n"magnetic.Rm" = [3.0, 4.0]\n'


def cli(capsys, *argv):
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def one_json_object(stdout: str) -> dict:
    """Exactly one JSON object on stdout, nothing else."""
    lines = [line for line in stdout.splitlines() if line.strip()]
    assert len(lines) == 1, stdout
    obj = json.loads(lines[0])
    assert isinstance(obj, dict)
    return obj


# ---- 1. stdout for results and cautions, stderr for progress -----------------------------------

def test_run_results_on_stdout_progress_on_stderr(write_case, tmp_path, capsys):
    path = write_case(QUICK)
    code, out, err = cli(capsys, "run", path, "--out", tmp_path / "a")
    assert code == 0
    assert re.search(r"^growth rate gamma = -0\.25\d* \+- ", out, re.M), out  # exact: -eta k^2 = -0.25
    assert "converged" in out and "wrote" in out
    # the calibrated uncertainty and the field a script should test (kindyn.run module docstring)
    assert re.search(r"^growth_rate_uncertainty = \S+ \(calibrated estimate; the \+- above is a safe bound "
                     r"covering fit, time step.*\); trustworthy: ", out, re.M), out
    assert "collecting samples" in err and "growth rate" not in err
    code, quiet_out, quiet_err = cli(capsys, "run", path, "--out", tmp_path / "b", "--quiet")
    assert code == 0 and quiet_err == ""  # --quiet: no progress ...
    assert "growth rate gamma" in quiet_out  # ... but the results stay


def test_run_cautions_stay_with_quiet_and_go_to_json_and_stderr(write_case, tmp_path, capsys):
    path = write_case(COARSE)
    code, out, err = cli(capsys, "run", path, "--out", tmp_path / "a", "--quiet")
    assert code == 0 and err == ""
    assert re.search(r"^caution: .*under-resolved", out, re.M), out
    assert "trustworthy: NO (a resolution criterion tripped)" in out
    code, out, err = cli(capsys, "run", path, "--out", tmp_path / "b", "--quiet", "--json")
    result = one_json_object(out)
    assert code == 0 and result["resolution_warning"] is True
    assert any("under-resolved" in c for c in result["cautions"])
    for caution in result["cautions"]:
        assert f"kindyn run: caution: {caution}" in err


def test_modes_results_and_cautions(write_case, tmp_path, capsys):
    path = write_case(MODES)
    code, out, err = cli(capsys, "modes", path, "--out", tmp_path / "a", "--quiet")
    assert code == 0 and err == ""
    assert "leading eigenvalue" in out and "converged" in out and "caution: eigenvalues carry" in out
    code, out, err = cli(capsys, "modes", path, "--out", tmp_path / "b", "--quiet", "--json")
    result = one_json_object(out)
    assert code == 0 and result["converged"] is True
    assert result["growth_rate_error"] == pytest.approx(result["residuals"][0] / result["propagation_time"])
    assert result["cautions"] and all(f"kindyn modes: caution: {c}" in err for c in result["cautions"])


def test_testfield_results_and_cautions(write_case, tmp_path, capsys):
    path = write_case(TESTFIELD_ABC)
    code, out, err = cli(capsys, "testfield", path, "--out", tmp_path / "a", "--quiet")
    assert code == 0 and err == ""
    assert "uniform test fields: alpha_ij" in out and "caution: SOCA" in out
    code, out, err = cli(capsys, "testfield", path, "--out", tmp_path / "b", "--quiet", "--json")
    result = one_json_object(out)
    assert code == 0 and any("SOCA" in c for c in result["cautions"])
    assert all(f"kindyn testfield: caution: {c}" in err for c in result["cautions"])


def test_sweep_results_on_stdout(write_case, tmp_path, capsys):
    path = write_case(SWEEP)
    code, out, err = cli(capsys, "sweep", path, "--out", tmp_path / "a", "--quiet", "--workers", "1")
    assert code == 0 and err == ""
    # B = u decays at exactly -eta = -1/Rm
    assert re.search(r"^  magnetic\.Rm = 3: gamma = -0\.333\d* \+- \S+, omega = 0 \(converged\)$", out, re.M), out
    assert re.search(r"^  magnetic\.Rm = 4: gamma = -0\.25\d* \+- \S+, omega = 0 \(converged\)$", out, re.M), out
    assert "wrote" in out
    code, out, err = cli(capsys, "sweep", path, "--out", tmp_path / "a", "--quiet", "--json")
    result = one_json_object(out)
    assert code == 0 and all(p["reused"] for p in result["points"]) and "cautions" in result


def test_json_stdout_stays_clean_when_a_user_module_prints_on_import(tmp_path):
    """A callable flow whose module prints on import (and whose import starts a child process that
    writes to file descriptor 1): ``--json`` stdout is still exactly one JSON object."""
    (tmp_path / "noisy_flow.py").write_text(textwrap.dedent("""\
        import os
        import numpy as np
        print("hello from noisy_flow")
        os.system("echo child process output")


        def abc(x, y, z, t):
            zero = 0.0 * (x + y + z)
            return (np.sin(z) + np.cos(y) + zero, np.sin(x) + np.cos(z) + zero, np.sin(y) + np.cos(x) + zero)
        """))
    case = tmp_path / "noisy.toml"
    case.write_text(textwrap.dedent("""\
        [domain]
        grid = [8, 8, 8]
        [flow]
        type = "callable"
        function = "noisy_flow.py:abc"
        steady = true
        U = 1.0
        k_f = 1.0
        [magnetic]
        Rm = 4.0
        initial_field = "flow"
        [numerics]
        planning = "estimate"
        [output]
        figure = false
        """))
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}
    done = subprocess.run([sys.executable, "-m", "kindyn", "run", str(case), "--out", str(tmp_path / "o"),
                           "--json", "--quiet"], capture_output=True, text=True, env=env, timeout=300)
    assert done.returncode == 0, done.stderr
    result = one_json_object(done.stdout)
    assert result["growth_rate"] == pytest.approx(-0.25, rel=1e-9)  # B = u decays as exp(-eta t)
    assert "hello from noisy_flow" in done.stderr and "child process output" in done.stderr


# ---- 2. a run without an estimate ----------------------------------------------------------------

def test_run_without_an_estimate_says_so(write_case, tmp_path, capsys):
    path = write_case(RANDOM.format(Rm=8.0, max_time=10.0))
    code, out, err = cli(capsys, "run", path, "--out", tmp_path / "a")  # was a TypeError while printing
    assert code == 0, err
    assert "growth rate: not converged, no estimate yet" in out and "collecting samples" in err
    code, out, err = cli(capsys, "run", path, "--out", tmp_path / "b", "--quiet", "--json")
    result = one_json_object(out)
    assert code == 0
    assert result["growth_rate"] is None and result["growth_rate_error"] is None and result["frequency"] is None
    assert result["converged"] is False and result["estimate_available"] is False
    assert isinstance(result["growth_rate_preliminary"], float)
    assert any(c.startswith("not converged, no estimate yet") for c in result["cautions"])
    assert "caution: not converged, no estimate yet" in err


# ---- 3. ensemble carries its members' resolution warnings --------------------------------------

def test_ensemble_carries_resolution_warnings(write_case, tmp_path, capsys):
    # Rm = 20 on 12^3 is badly under-resolved for this flow (the case file's own note)
    path = write_case(RANDOM.format(Rm=20.0, max_time=30.0))
    code, out, err = cli(capsys, "ensemble", path, "--count", "2", "--out", tmp_path / "a", "--quiet")
    assert code == 0 and err == ""
    assert re.search(r"^caution: 2 of 2 realisation\(s\) may be under-resolved \(flow seeds 31, 32", out, re.M), out
    code, out, err = cli(capsys, "ensemble", path, "--count", "2", "--out", tmp_path / "b", "--quiet", "--json")
    result = one_json_object(out)
    assert code == 0
    assert result["resolution_warning"] is True and result["resolution_warnings"] == 2
    assert [m["resolution_warning"] for m in result["members"]] == [True, True]
    assert all(m["cutoff_ratio"] > 0.03 for m in result["members"])  # above the default threshold
    assert any("under-resolved" in c for c in result["cautions"])
    assert "kindyn ensemble: caution: 2 of 2 realisation(s) may be under-resolved" in err
    nc = read_dataset(result["output"])
    assert nc["resolution_warning"].tolist() == [1, 1]
    np.testing.assert_allclose(nc["cutoff_ratio"], [m["cutoff_ratio"] for m in result["members"]], rtol=1e-15)
    assert "under-resolved" in nc["attributes"]["caution"]
    member = read_dataset(result["members"][0]["output"])
    assert "under-resolved" in member["attributes"]["resolution_caution"]
    # both criteria reach the members' files and the summary (the run's own caution, not one rebuilt
    # from the cut-off ratio alone): k_cut l < 1 on 12^3 at Rm = 20 (kindyn.diagnostics.resolution)
    assert "diffusive scale" in member["attributes"]["resolution_caution"]
    assert any("diffusive scale" in c for c in result["cautions"]) and "diffusive scale" in nc["attributes"]["caution"]


# ---- 4. sweep: uncertain signs, invalid swept values --------------------------------------------

def _result_with(critical, windows=()):
    spec = SimpleNamespace(critical="magnetic.Rm", keys=("magnetic.Rm",))
    return SimpleNamespace(spec=spec, rows=[], critical=list(critical), windows=list(windows), resolution=[],
                           cautions=[], summary_path="s.nc", figure_path=None, wall_seconds=1.0)


def test_sweep_prints_an_uncertain_sign_change_as_uncertain():
    from kindyn.commands.sweep import json_report, report_lines
    from kindyn.sweep.critical import dynamo_windows, sign_changes

    # gamma(9) = -1e-4 +- 5e-4: its sign is not certain, so neither is the sign change
    x, gamma, error = [8.0, 9.0, 10.0], [-2e-3, -1e-4, 3e-3], [1e-4, 5e-4, 1e-4]
    crossings = sign_changes(x, gamma, error)
    assert len(crossings) == 1 and not crossings[0].sign_certain
    critical = [{**c.as_dict(), "key": "magnetic.Rm", "line": {}} for c in crossings]
    windows = [{**w.as_dict(), "key": "magnetic.Rm", "line": {}} for w in dynamo_windows(crossings, x, gamma)]
    result = _result_with(critical, windows)
    text = "\n".join(report_lines(result))
    assert "turns positive at" not in text
    assert "gamma may turn positive near magnetic.Rm = " in text and "sign uncertain" in text
    assert "9: gamma = -0.0001 +- 0.0005" in text  # the uncertain end, rounded to its error
    assert re.search(r"dynamo window: .* \(sign uncertain\) < magnetic\.Rm", text), text
    report = json_report(result)
    assert report["critical"][0]["sign_certain"] is False
    assert any("not certain" in c for c in report["cautions"])
    # a certain one still reads "turns positive at"
    sure = sign_changes(x, [-2e-3, -1e-3, 3e-3], error)
    text = "\n".join(report_lines(_result_with([{**c.as_dict(), "key": "magnetic.Rm", "line": {}} for c in sure])))
    assert "gamma turns positive at magnetic.Rm = " in text and "uncertain" not in text


@pytest.mark.parametrize("values, shown, expected", [
    ("[3.0, -1.0]", "-1.0", "a positive number"),
    ('[3.0, "abc"]', '"abc"', "a number"),
])
def test_an_invalid_swept_value_is_a_case_error_before_any_point_runs(write_case, tmp_path, capsys,
                                                                      values, shown, expected):
    path = write_case(QUICK + f'[sweep]\n"magnetic.Rm" = {values}\n')
    code, out, err = cli(capsys, "sweep", path, "--out", tmp_path / "out", "--workers", "1")
    lines = err.strip().splitlines()
    assert code == 2 and out == "" and len(lines) == 1 and "Traceback" not in err
    assert f'sweep."magnetic.Rm" = {shown}' in lines[0] and expected in lines[0] and "case.toml" in lines[0]
    assert "value 2 of 2" in lines[0]
    assert not (tmp_path / "out").exists()  # nothing ran, nothing was written


# ---- 5. testfield text: tensors, off-diagonal terms, errors, closure ----------------------------

def _numbers_after(label: str, text: str) -> list[str]:
    return re.findall(rf"^\s+{label}\s+(.*)$", text, re.M)


def test_testfield_text_shows_the_uniform_tensor_and_soca_closed_form(write_case, tmp_path, capsys):
    """ABC flow A = B = C = 1, k = 1 at eta = 0.5: SOCA uniform alpha = -1/(eta k) delta_ij = -2 delta_ij
    (tests/test_testfield_abc.py); the text shows both 3x3 tensors, the full one equal to the file's."""
    path = write_case(TESTFIELD_ABC)
    code, out, err = cli(capsys, "testfield", path, "--out", tmp_path, "--quiet")
    assert code == 0, err
    nc = read_dataset(tmp_path / "case-testfield.nc")
    blocks = out.split("uniform test fields: ")
    full = blocks[1].splitlines()[2:5]
    soca = blocks[2].splitlines()[2:5]
    assert [row.split()[0] for row in full] == ["x", "y", "z"]
    for i, row in enumerate(full):
        cells = row.split()[1:]
        assert len(cells) == 3
        assert float(cells[i]) == pytest.approx(nc["alpha"][i, i], rel=1e-5)  # 6 significant digits
        assert [cells[j] for j in range(3) if j != i] == ["0", "0"]  # cubic symmetry: isotropic
    for i, row in enumerate(soca):
        assert float(row.split()[1 + i]) == pytest.approx(-2.0, rel=1e-12)
    assert "errors: none statistical (direct steady solve" in out
    assert re.search(r"^K = 1: alpha_ij\(K\) \| eta_ij\(K\)", out, re.M) and re.search(r"^K = 2: ", out, re.M)


def test_testfield_text_shows_off_diagonal_terms_with_errors(write_case, tmp_path, capsys):
    """Galloway–Proctor flow (time-dependent: block-average errors). Every printed coefficient of
    alpha_ij(K) carries its error, and the off-diagonal alpha_xy, alpha_yx equal the file's values
    within the printed rounding."""
    path = write_case(GP)
    code, out, err = cli(capsys, "testfield", path, "--out", tmp_path, "--quiet")
    assert code == 0, err
    nc = read_dataset(tmp_path / "case-testfield.nc")
    assert "uniform test fields: alpha_ij" in out  # uniform = true by default
    lines = out.splitlines()
    k = next(i for i, line in enumerate(lines) if line.startswith("K = 1: "))
    rows = lines[k + 2:k + 5]
    cell = re.compile(r"(\(?[+-]\d+(?:\.\d+)? \+- \d+(?:\.\d+)?\)?(?:e[+-]\d+)?)")
    for i, row in enumerate(rows):
        alpha_part = row.split("|")[0]
        cells = cell.findall(alpha_part)
        assert len(cells) == 2, row  # both columns carry an error
        for j, text in enumerate(cells):
            value, error = _parse(text)
            true, true_error = nc["alpha_K"][0, i, j], nc["alpha_K_error"][0, i, j]
            assert error == pytest.approx(float(f"{true_error:.0e}"), rel=1e-9)  # one significant digit
            assert abs(value - true) <= 0.5 * 10 ** math.floor(math.log10(error)) * 1.0001 + 1e-300
    off = nc["alpha_K"][0, 0, 1]
    assert abs(off) > 10 * nc["alpha_K_error"][0, 0, 1]  # a visible off-diagonal term, printed above


def _parse(text: str) -> tuple[float, float]:
    m = re.fullmatch(r"\(?([+-]?[\d.]+) \+- ([\d.]+)\)?(?:e([+-]\d+))?", text.strip())
    scale = 10.0 ** int(m.group(3)) if m.group(3) else 1.0
    return float(m.group(1)) * scale, float(m.group(2)) * scale


def test_closure_line_is_rounded_to_its_error():
    """Synthetic result: alpha = -0.35 +- 2e-4, eta_t = 0.29 +- 1e-4 at K = 1, eta = 0.2, direct run
    gamma = 0.0512 +- 3e-5: p = 0.35 - 0.49 = -0.14 with error 1 * 2e-4 + 1 * 1e-4 = 3e-4."""
    from kindyn.commands.common import with_error
    from kindyn.commands.testfield import text_report
    from kindyn.testfield.closure import closure_report

    zeros = np.zeros((1, 3, 2))
    alpha_K = zeros.copy()
    alpha_K[0, 0, 0] = alpha_K[0, 1, 1] = -0.35
    eta_K = zeros.copy()
    eta_K[0, 0, 0] = eta_K[0, 1, 1] = 0.29
    err_a = np.full_like(zeros, 2e-4)
    err_e = np.full_like(zeros, 1e-4)
    result = TestFieldResult(2, (1,), np.array([1.0]), "time", 5.0, 0.2, 1.0, 1.0, True, "converged",
                             tensors={"alpha_K": alpha_K, "eta_K": eta_K, "alpha_K_soca": alpha_K,
                                      "eta_K_soca": eta_K},
                             errors={"alpha_K": err_a, "eta_K": err_e, "alpha_K_soca": err_a, "eta_K_soca": err_e},
                             solver={"kind": "time stepping"})
    result.closure = closure_report(-0.35, 0.29, alpha_K[0], eta_K[0], 0.2, 1.0, 2, 1.0, 0.0512, 3e-5, 0.9)
    case = SimpleNamespace(name="synthetic", flow_type="test", Rm=5.0, eta=0.2)
    (line,) = [line for line in text_report(case, result) if line.startswith("closure")]
    p = -0.14
    assert f"= {with_error(p, 3e-4, sign=True)};" in line and "-0.1400 +- 0.0003" in line
    assert "gamma = +0.05120 +- 0.00003" in line
    rel = abs(p - 0.0512) / 0.0512
    rel_error = math.hypot(3e-4 / 0.0512, abs(p) * 3e-5 / 0.0512 ** 2)
    assert f"relative difference {with_error(rel, rel_error)}" in line and "3.734 +- 0.006" in line


@pytest.mark.parametrize("value, error, text", [
    (0.05296, 0.00037, "+0.0530 +- 0.0004"),
    (-0.00806884, 4.3e-05, "-0.00807 +- 0.00004"),
    (1234.5, 23.0, "+1230 +- 20"),
    (0.179, 0.096, "+0.2 +- 0.1"),
    (3.1e-14, 1.2e-15, "(+3.1 +- 0.1)e-14"),
    (0.5, float("nan"), "+0.5 (no error estimate)"),
])
def test_value_rounded_to_its_error(value, error, text):
    from kindyn.commands.common import with_error

    assert with_error(value, error, sign=True) == text


# ---- 6. the Lorentzian fit uses alpha(K = 0) ----------------------------------------------------

@pytest.mark.parametrize("c0, kc", [(-0.7, 1.8), (0.25, 0.6)])
def test_lorentzian_with_known_c0_recovers_kc(c0, kc):
    K = np.array([1.0, 2.0, 3.0])
    values = c0 / (1 + (K / kc) ** 2)
    fit = fit_lorentzian(K, values, k_f=1.0, c0=c0)
    assert fit.c0 == c0 and fit.c0_fixed and not fit.kc_fixed and fit.fixed == ["c0"]
    assert fit.kc == pytest.approx(kc, rel=1e-10) and fit.rms_relative_misfit < 1e-12
    single = fit_lorentzian(K[1:2], values[1:2], k_f=1.0, c0=c0)  # one K: k_c exactly
    assert single.fixed == ["c0"] and single.kc == pytest.approx(kc, rel=1e-13)
    assert "c_0 fixed" in single.as_dict()["note"]
    plain = fit_lorentzian(K[:1], values[:1], k_f=1.0)  # no K = 0 value: k_c fixed to k_f, and says so
    assert plain.fixed == ["kc"] and plain.kc == 1.0 and "k_c fixed to the flow wavenumber" in plain.note
    impossible = fit_lorentzian(K[:1], [2 * c0], k_f=1.0, c0=c0)  # |c(K)| > |c_0|: no Lorentzian
    assert impossible.fixed == ["c0"] and math.isnan(impossible.kc) and "no Lorentzian" in impossible.note


@pytest.mark.parametrize("modes", [(1,), (1, 2, 3)])
def test_kernel_fit_of_alpha_uses_the_uniform_field_alpha(modes):
    """Anisotropic ABC flow (A, B, C) = (0.7, 1.3, 0.4), k = 1, eta = 0.8 (Rm = 1.25): the alpha fits
    take c_0 from the uniform test fields; for SOCA the closed form gives c_0 = -(B^2 + C^2)/(2 eta k)
    and k_c = k exactly (rtol 1e-10)."""
    A, B, C, k, eta = 0.7, 1.3, 0.4, 1.0, 0.8
    text = f"""
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
    modes = {list(modes)}
    onset_check = false
    """
    r = calibrate(load_case("abc.toml", text=textwrap.dedent(text)))
    full, soca = r.fits["alpha"], r.fits["alpha_soca"]
    alpha0 = 0.5 * (r.tensors["alpha"][0, 0] + r.tensors["alpha"][1, 1])
    assert full["c0"] == pytest.approx(alpha0, rel=1e-14) and full["fixed"] == ["c0"] and full["c0_fixed"]
    assert soca["c0"] == pytest.approx(-(B ** 2 + C ** 2) / (2 * eta * k), rel=1e-10)
    assert soca["kc"] == pytest.approx(k, rel=1e-10) and soca["fixed"] == ["c0"]
    assert "uniform-field alpha" in full["note"]
    # eta_t has no K = 0 value: both parameters fitted (several K) or k_c fixed (one K), and it says which
    assert r.fits["eta_t"]["fixed"] == (["kc"] if len(modes) == 1 else [])
