"""Runs across processes: the distributed layout (mpi4py-fft) gives the serial answers.

Each check launches ``mpiexec -n P`` on a small script (or the command) and compares with the
serial run of the same case. References: the serial code path, itself checked against exact
solutions and the dense Galerkin reference (tests/test_exact_solutions.py,
tests/test_reference_galerkin.py); the distributed layout must not change a result beyond
round-off (common practice for domain-decomposed spectral codes). Numbers:

* energy series equal to 1e-12 relative (the transforms sum in another order: round-off);
* growth rates equal to the last printed digit (6 significant digits) and to 1e-10 absolute;
* test-field coefficients equal to 1e-10.

The tests skip when mpi4py, mpi4py-fft or an ``mpiexec`` launcher is missing, except when
``KINDYN_REQUIRE_MPI=1`` (set by CI): then a missing MPI stack fails.
"""

from __future__ import annotations

import importlib.util
import json
import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

CASES = Path(__file__).resolve().parent.parent / "cases"
MPIEXEC = shutil.which("mpiexec")
HAVE_MPI = bool(MPIEXEC) and all(importlib.util.find_spec(m) for m in ("mpi4py", "mpi4py_fft"))
if not HAVE_MPI and os.environ.get("KINDYN_REQUIRE_MPI") == "1":
    raise RuntimeError("KINDYN_REQUIRE_MPI=1 but mpi4py, mpi4py-fft or mpiexec is missing")
pytestmark = pytest.mark.skipif(not HAVE_MPI, reason="needs mpi4py, mpi4py-fft and mpiexec (pip install kindyn[mpi])")

RUNNER = textwrap.dedent("""
    import json, os, sys
    import numpy as np
    from kindyn.case.load import load_case
    from kindyn.run import run_growth
    from kindyn.output.checkpoint import Checkpoint

    path, out, stop_after = sys.argv[1], sys.argv[2], int(sys.argv[3])
    case = load_case(path)

    class Stopping(Checkpoint):  # a kill right after the n-th checkpoint (n = stop_after > 0)
        saves = 0
        def save(self, case, state):
            super().save(case, state)
            Stopping.saves += 1
            if stop_after and Stopping.saves >= stop_after:
                os._exit(137)  # as kill -9: the launcher then ends the other processes

    point = Stopping(out + ".checkpoint.nc") if stop_after >= 0 else None
    outcome = run_growth(case, checkpoint=point)
    if outcome.field is not None:  # the first process
        e = outcome.estimate
        np.save(out + ".npy", np.asarray(outcome.record.log_energy))
        with open(out + ".json", "w") as f:
            json.dump({"growth_rate": e.growth_rate, "error": e.error, "frequency": e.frequency,
                       "steps": outcome.steps, "resumed": outcome.resumed, "cutoff_ratio": outcome.cutoff_ratio,
                       "field_shape": list(outcome.field.shape)}, f)
""")


def _launch(processes: int, script: Path, *args, timeout: float = 240.0):
    command = [sys.executable, str(script), *map(str, args)]
    if processes > 1:
        command = [MPIEXEC, "-n", str(processes), *command]
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PMI_", "PMIX_", "OMPI_"))}
    return subprocess.run(command, capture_output=True, text=True, timeout=timeout, env=env)


def _run(tmp_path, case_text: str, processes: int, name: str, stop_after: int = -1) -> dict:
    script = tmp_path / "runner.py"
    script.write_text(RUNNER)
    case = tmp_path / "case.toml"
    case.write_text(case_text)
    done = _launch(processes, script, case, tmp_path / name, stop_after)
    if stop_after > 0:  # killed on purpose
        assert done.returncode != 0
        return {}
    assert done.returncode == 0, done.stderr[-3000:]
    result = json.loads((tmp_path / f"{name}.json").read_text())
    result["log_energy"] = np.load(tmp_path / f"{name}.npy")
    return result


def _same(serial: dict, parallel: dict, growth_atol: float = 1e-10, require_estimate: bool = True):
    a, b = serial["log_energy"], parallel["log_energy"]
    assert a.size == b.size
    np.testing.assert_allclose(b, a, rtol=1e-12, atol=1e-12 * np.abs(a).max())
    assert parallel["steps"] == serial["steps"]
    g1, g2 = serial["growth_rate"], parallel["growth_rate"]
    if require_estimate:
        assert np.isfinite(g1)
    assert (np.isnan(g1) and np.isnan(g2)) or abs(g2 - g1) <= growth_atol
    assert f"{g2:+.6g}" == f"{g1:+.6g}"


ABC_24 = (CASES / "abc-first-window.toml").read_text()


def test_abc_window_case_on_two_processes_equals_serial(tmp_path):
    serial = _run(tmp_path, ABC_24, 1, "serial")
    parallel = _run(tmp_path, ABC_24, 2, "parallel")
    _same(serial, parallel)
    assert parallel["field_shape"] == [3, 24, 24, 24]  # the whole field, gathered on the first process
    assert parallel["cutoff_ratio"] == pytest.approx(serial["cutoff_ratio"], rel=1e-10)


UNEVEN = """
[domain]
lengths = ["2*pi", "2*pi", "4*pi"]
grid = [10, 8, 12]
[flow]
type = "galloway-proctor"
[magnetic]
Rm = 8.0
seed = 5
[run]
max_time = 20.0
"""


def test_galloway_proctor_on_three_processes_of_an_uneven_grid_equals_serial(tmp_path):
    serial = _run(tmp_path, UNEVEN, 1, "serial")
    parallel = _run(tmp_path, UNEVEN, 3, "parallel")
    _same(serial, parallel, require_estimate=False)  # a short run: the energy series is the check


RENOVATING = """
[domain]
grid = [16, 16, 16]
[flow]
type = "random-helical"
k_min = 1.0
k_max = 3.0
sigma = 1.0
seed = 11
time_dependence = "renovating"
tau = 0.5
[magnetic]
Rm = 20.0
seed = 2
[run]
max_time = 6.0
"""


def test_renovating_random_flow_is_the_same_flow_on_two_processes(tmp_path):
    serial = _run(tmp_path, RENOVATING, 1, "serial")
    parallel = _run(tmp_path, RENOVATING, 2, "parallel")
    _same(serial, parallel, require_estimate=False)  # a short run: the energy series is the check


@pytest.mark.parametrize("first, second", [(2, 1), (1, 2)], ids=["2-then-1", "1-then-2"])
def test_checkpoint_resumes_on_another_number_of_processes(tmp_path, first, second):
    text = ABC_24 + "\n[run]\ncheckpoint_seconds = 1e-6\n" if "[run]" not in ABC_24 else \
        ABC_24.replace("[run]", "[run]\ncheckpoint_seconds = 1e-6", 1)
    straight = _run(tmp_path, text, 1, "straight")
    _run(tmp_path, text, first, "resumed", stop_after=60)  # killed right after its 60th checkpoint
    assert (tmp_path / "resumed.checkpoint.nc").exists()
    resumed = _run(tmp_path, text, second, "resumed", stop_after=0)  # with its checkpoint, not killed
    assert resumed["resumed"] is True
    _same(straight, resumed)


FAILING_FLOW = '''
import numpy as np
def velocity(x, y, z, t):
    # only on the second half of an 8-point x axis: the block of one of two processes (the checks
    # before the run sample the whole grid, faces and shifted grids, never this block)
    if np.shape(x)[0] == 4 and float(np.min(x)) > 0.5:
        raise RuntimeError("this flow fails on one block")
    return (np.sin(z) + 0 * x, np.sin(x) + 0 * y, np.sin(y) + 0 * z)
'''


def test_a_flow_that_raises_on_one_process_ends_every_process_with_one_message(tmp_path):
    (tmp_path / "bad_flow.py").write_text(FAILING_FLOW)
    case = tmp_path / "bad.toml"
    case.write_text(textwrap.dedent("""
        [domain]
        grid = [8, 8, 8]
        [flow]
        type = "callable"
        function = "bad_flow.py:velocity"
        steady = true
        U = 1.0
        k_f = 1.0
        [magnetic]
        Rm = 4.0
    """))
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PMI_", "PMIX_", "OMPI_"))}
    done = subprocess.run([MPIEXEC, "-n", "2", sys.executable, "-m", "kindyn", "run", str(case), "--out",
                           str(tmp_path / "out")], capture_output=True, text=True, timeout=60, env=env)
    assert done.returncode != 0
    lines = [line for line in done.stderr.splitlines() if "fails on one block" in line]
    assert len(lines) == 1, done.stderr
    assert "Traceback" not in done.stderr


TESTFIELD_RUNNER = textwrap.dedent("""
    import sys
    import numpy as np
    from kindyn.case.load import load_case
    from kindyn.testfield.calibration import calibrate

    result = calibrate(load_case(sys.argv[1]))
    import os
    if os.environ.get("PMI_RANK", "0") == "0":
        np.savez(sys.argv[2], converged=result.converged, **{k: np.asarray(v) for k, v in result.tensors.items()})
""")
TESTFIELD_CASE = """
[domain]
grid = [12, 12, 12]
[flow]
type = "abc"
[magnetic]
Rm = 2.0
[testfield]
method = "time"
modes = [1]
tolerance = 1e-3
max_time = 120.0
reset_interval = 20.0
"""


def test_test_field_coefficients_on_two_processes_equal_serial(tmp_path):
    script = tmp_path / "testfield_runner.py"
    script.write_text(TESTFIELD_RUNNER)
    case = tmp_path / "tf.toml"
    case.write_text(TESTFIELD_CASE)
    results = []
    for processes, name in ((1, "serial.npz"), (2, "parallel.npz")):
        done = _launch(processes, script, case, tmp_path / name)
        assert done.returncode == 0, done.stderr[-3000:]
        results.append(np.load(tmp_path / name))
    serial, parallel = results
    assert bool(serial["converged"]) and bool(parallel["converged"])
    for key in ("alpha", "alpha_soca", "alpha_K", "eta_K", "alpha_K_soca", "eta_K_soca"):
        np.testing.assert_allclose(parallel[key], serial[key], rtol=0, atol=1e-10)
