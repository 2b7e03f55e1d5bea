"""The cluster route against a real Slurm scheduler (a one-node cluster started on this machine).

scripts/cluster/one_node_slurm.py starts slurmctld and slurmd with a generated slurm.conf in a
temporary folder; the tests submit the shipped job templates of scripts/cluster/ (not copies) and
compare with serial runs of the same case. Reference: a serial ``kindyn run`` of the same case
(itself checked against exact solutions and published windows elsewhere); a batch job must not
change a result beyond round-off.

The tests skip when Slurm, munge or root are missing, except when ``KINDYN_REQUIRE_SLURM=1`` (set
by CI): then they fail.
"""

from __future__ import annotations

import importlib.util
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
CLUSTER = ROOT / "scripts" / "cluster"
sys.path.insert(0, str(CLUSTER))
from one_node_slurm import OneNodeSlurm, available  # noqa: E402

REASON = available()
HAVE_MPI = bool(shutil.which("mpiexec")) and all(importlib.util.find_spec(m) for m in ("mpi4py", "mpi4py_fft"))
if REASON and os.environ.get("KINDYN_REQUIRE_SLURM") == "1":
    raise RuntimeError(f"KINDYN_REQUIRE_SLURM=1 but no one-node Slurm cluster can start here: {REASON}")
pytestmark = pytest.mark.skipif(REASON is not None, reason=f"no Slurm test cluster: {REASON}")

CASE = """
[domain]
grid = [16, 16, 16]
[flow]
type = "abc"
[magnetic]
Rm = 12.0
seed = 7
[output]
figure = false
"""


@pytest.fixture(scope="module")
def slurm(tmp_path_factory):
    cluster = OneNodeSlurm(tmp_path_factory.mktemp("slurm"))
    cluster.start()
    yield cluster
    cluster.stop()


def _clean_env(env):
    return {k: v for k, v in env.items() if not k.startswith(("PMI_", "PMIX_", "OMPI_"))}


@pytest.mark.skipif(not HAVE_MPI, reason="needs the mpi extra (mpi4py, mpi4py-fft, mpiexec)")
def test_batch_job_of_a_two_process_run_gives_the_serial_answer(slurm, tmp_path):
    case = tmp_path / "abc16.toml"
    case.write_text(CASE)
    serial = subprocess.run([sys.executable, "-m", "kindyn", "run", str(case), "--out", str(tmp_path / "serial"),
                             "--json", "--quiet"], capture_output=True, text=True, env=_clean_env(os.environ))
    assert serial.returncode == 0, serial.stderr
    expected = json.loads(serial.stdout)
    job = slurm.submit(CLUSTER / "slurm_mpi_run.sh", case, tmp_path / "batch", cwd=tmp_path)
    slurm.wait(job, timeout=300)
    result = json.loads((tmp_path / "batch" / "abc16.json").read_text())
    assert result["converged"] == expected["converged"] and result["stop_reason"] == expected["stop_reason"]
    assert abs(result["growth_rate"] - expected["growth_rate"]) <= 1e-10
    assert f"{result['growth_rate']:+.6g}" == f"{expected['growth_rate']:+.6g}"
    assert (tmp_path / "batch" / "abc16.nc").exists()
    log = (tmp_path / f"kindyn-run-{job}.out").read_text()
    assert "Traceback" not in log
