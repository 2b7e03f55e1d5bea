"""The cluster route against a real Slurm scheduler (a one-node cluster started on this machine).

scripts/cluster/one_node_slurm.py starts slurmctld and slurmd with a generated slurm.conf in a
temporary folder; the tests submit the shipped job templates of scripts/cluster/ (not copies) and
compare with serial runs of the same case. Reference: a serial ``kindyn run`` of the same case
(itself checked against exact solutions and published windows elsewhere); a batch job must not
change a result beyond round-off. The sweeps (``kindyn sweep scripts/cluster/slurm_sweep.toml --cluster
slurm``, workers submitted by dask-jobqueue) are compared with the same file swept by local
processes; a ``scancel`` mid-sweep, an impossible request and a job that never starts are checked
to lose only in-flight points / give one error line within a bound. Runtime ~3 min on 2 shared cores.

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
import time
from pathlib import Path

import numpy as np
import pytest

from kindyn.output.netcdf import read_dataset

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


# ------------------------------------------------------------------ sweeps through dask-jobqueue
# The shipped template scripts/cluster/slurm_sweep.toml, as a user would adapt it: the partition and
# the venv line changed (the test's Python is the workers' Python), plus a small grid for speed.
# Reference: the same file swept by local processes (tests/test_sweep_local.py checks those against
# separate runs); the workers run the same run_point on the same inputs, so equality to round-off.
TEMPLATE = CLUSTER / "slurm_sweep.toml"
SMALL = ["--set", "domain.grid=[8,8,8]", "--set", 'sweep."magnetic.Rm"=[2,3,4,6]',
         "--set", 'numerics.planning="estimate"']
ON_THIS_CLUSTER = ["--set", 'cluster.queue="debug"', "--set", "cluster.job_script_prologue=[]",
                   "--set", "cluster.jobs=1", "--set", "cluster.cores=1", "--set", 'cluster.memory="1GB"', "--set", "cluster.start_timeout=120"]
HAVE_JOBQUEUE = importlib.util.find_spec("dask_jobqueue") is not None
needs_jobqueue = pytest.mark.skipif(not HAVE_JOBQUEUE and os.environ.get("KINDYN_REQUIRE_SLURM") != "1",
                                    reason='needs the cluster extra (pip install "kindyn[cluster]")')


def _sweep(out, *extra, env=None, check=True):
    done = subprocess.run([sys.executable, "-m", "kindyn", "sweep", str(TEMPLATE), "--out", str(out), "--json",
                           *SMALL, *extra], capture_output=True, text=True, env=_clean_env(env or os.environ),
                          timeout=300)
    if check:
        assert done.returncode == 0, done.stderr
        return json.loads(done.stdout), done.stderr
    return done


def _numbers(report):
    return {p["magnetic.Rm"]: (p["status"], p["growth_rate"], p["growth_rate_error"], p["frequency"])
            for p in report["points"]}


@pytest.fixture(scope="module")
def local_sweep(tmp_path_factory):
    report, _ = _sweep(tmp_path_factory.mktemp("local") / "out", "--workers", "2")
    return report


def _same(a, b):
    assert a.keys() == b.keys()
    for rm in a:
        assert a[rm][0] == b[rm][0], rm
        for x, y in zip(a[rm][1:], b[rm][1:]):
            assert (x is None and y is None) or x == pytest.approx(y, rel=1e-12, abs=1e-14), rm


@needs_jobqueue
def test_sweep_on_slurm_jobs_gives_the_local_numbers(slurm, local_sweep, tmp_path):
    report, err = _sweep(tmp_path / "out", "--cluster", "slurm", *ON_THIS_CLUSTER, "--set", "cluster.cores=2",
                         env=slurm.env)
    assert "slurm job(s) of 2 core(s)" in err and "Traceback" not in err
    _same(_numbers(report), _numbers(local_sweep))
    assert all(not p["reused"] for p in report["points"])
    script = (tmp_path / "out" / "cluster" / "worker-job.sh").read_text()
    assert "#SBATCH -p debug" in script and "--cpus-per-task=2" in script and "--nthreads 1" in script
    summary = read_dataset(tmp_path / "out" / "slurm_sweep-sweep.nc")
    assert np.allclose(summary["growth_rate"], [_numbers(local_sweep)[rm][1] for rm in (2, 3, 4, 6)], rtol=1e-12)


@needs_jobqueue
def test_scancel_mid_sweep_then_resubmission_recomputes_only_the_unfinished_points(slurm, local_sweep, tmp_path):
    out = tmp_path / "out"
    command = [sys.executable, "-m", "kindyn", "sweep", str(TEMPLATE), "--out", str(out), "--json", *SMALL,
               "--cluster", "slurm", *ON_THIS_CLUSTER, "--set", "cluster.cores=1", "--set", "cluster.lost_timeout=3"]
    sweep = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                             env=_clean_env(slurm.env))
    deadline, job = time.monotonic() + 180, ""
    while time.monotonic() < deadline and sweep.poll() is None:
        finished = list((out / "points").glob("*.json")) if (out / "points").exists() else []
        job = subprocess.run(["squeue", "-h", "-n", "kindyn-sweep", "-t", "RUNNING", "-o", "%i"], env=slurm.env,
                             capture_output=True, text=True).stdout.strip()
        if finished and job:
            break
        time.sleep(0.2)
    assert job and sweep.poll() is None, "the sweep ended before a point finished"
    subprocess.run(["scancel", job], env=slurm.env, check=True)
    stdout, stderr = sweep.communicate(timeout=120)
    assert sweep.returncode == 0, stderr
    first = json.loads(stdout)
    done_first = {p["magnetic.Rm"] for p in first["points"] if p["status"] != "failed"}
    lost = {p["magnetic.Rm"] for p in first["points"] if p["status"] == "failed"}
    assert done_first and lost, first["points"]  # a point (1 core: one at a time) was running at the scancel
    assert all("lost: no Dask worker" in p["message"] for p in first["points"] if p["status"] == "failed")
    summary = read_dataset(out / "slurm_sweep-sweep.nc")  # readable, with the lost points marked
    assert len(summary["growth_rate"]) == 4
    second, err = _sweep(out, "--cluster", "slurm", *ON_THIS_CLUSTER, "--set", "cluster.cores=2", env=slurm.env)
    reused = {p["magnetic.Rm"] for p in second["points"] if p["reused"]}
    assert reused == done_first and f"{len(lost)} point(s) to run" in err
    _same(_numbers(second), _numbers(local_sweep))


@needs_jobqueue
def test_an_impossible_request_is_one_line_not_a_hang(slurm, tmp_path):
    start = time.monotonic()
    done = _sweep(tmp_path / "out", "--cluster", "slurm", *ON_THIS_CLUSTER, "--set", 'cluster.memory="100000GB"',
                  env=slurm.env, check=False)
    assert done.returncode == 2 and time.monotonic() - start < 60
    lines = done.stderr.strip().splitlines()
    assert "Traceback" not in done.stderr
    assert "expected a request Slurm can satisfy" in lines[-1] and "100000GB" in lines[-1]


@needs_jobqueue
def test_a_job_that_never_starts_is_one_line_after_start_timeout(slurm, tmp_path):
    start = time.monotonic()
    done = _sweep(tmp_path / "out", "--cluster", "slurm", *ON_THIS_CLUSTER, "--set", "cluster.start_timeout=5",
                  "--set", 'cluster.job_extra_directives=["--begin=now+1hour"]', env=slurm.env, check=False)
    assert done.returncode == 2 and time.monotonic() - start < 60, done.stderr
    assert "cluster.start_timeout = 5" in done.stderr and "PENDING BeginTime" in done.stderr
    assert not subprocess.run(["squeue", "-h", "-n", "kindyn-sweep"], env=slurm.env, capture_output=True,
                              text=True).stdout.strip()  # the pending job was cancelled
