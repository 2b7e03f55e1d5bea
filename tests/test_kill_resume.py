"""A run (and a sweep) killed with SIGKILL at a random moment and then resumed gives *bit-identical*
results to an uninterrupted one (issue 13, class 7): growth rate, error, stop time and steps (==).

The kill moment is a seeded random fraction (0.2 to 0.6) of how long a checkpoint existed in an
uninterrupted run of the same command on this machine, counted from the checkpoint's first
appearance: the kill lands while a checkpoint exists and the result is not yet written, on a fast
machine as on a slow one (a fixed delay once killed a fast machine's run after it had finished
and removed its checkpoint). So the resume really starts from a checkpoint. What makes
it exact: the estimate schedule is taken from the record, and the time-step error measured when
the estimator first meets the tolerance is checkpointed (before, a resume after that moment
measured it again from a later field and stopped at another time: ``test_resume_after_the_time_step_probe``).
A kill between the final write and the checkpoint's removal reuses the finished checkpoint.

Bit-identical resumption of a deterministic integration from its full saved state is `common practice`.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from kindyn.case import load_case
from kindyn.cli import main
from kindyn.output.checkpoint import Checkpoint
from kindyn.run import run_growth
from test_checkpoint_faults import run_cli
from test_sweep_resume import alive, children_of, records
from tests.small_cases import SEEDED_ABC

pytestmark = pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc to find worker processes")

CASE = SEEDED_ABC + textwrap.dedent("""\
    [run]
    tolerance = 1e-3
    checkpoint_seconds = 0.02
    [numerics]
    planning = "estimate"
    array_kernels = "numpy"
    [output]
    figure = false
    field = false
    """)
KEYS = ("growth_rate", "growth_rate_error", "frequency", "time", "steps", "stop_reason", "converged")


def _env():
    return {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}


def _checkpointed_span(command, checkpoints) -> tuple[str, float]:
    """Run ``command`` to the end; its standard output and how long (s) the first uninterrupted
    stretch lasted in which ``checkpoints()`` was true (polled every 2 ms)."""
    proc = subprocess.Popen(command, env=_env(), stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                            text=True, start_new_session=True)
    first = last = None
    try:
        deadline = time.time() + 300
        while proc.poll() is None and time.time() < deadline:
            present = checkpoints()
            if present and first is None:
                first = time.time()
            if not present and first is not None and last is None:
                last = time.time()
            time.sleep(0.002)
        stdout, _ = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    assert proc.returncode == 0 and first is not None, "the uninterrupted run failed or never checkpointed"
    return stdout, (last if last is not None else time.time()) - first


def _kill_when_checkpointed(command, checkpoints, span: float, seed: int) -> int:
    """Start ``command`` in its own session, wait for ``checkpoints()`` to be true, wait a seeded
    random fraction in ``[0.2, 0.6)`` of ``span`` (see :func:`_checkpointed_span`), SIGKILL the
    whole session; the return code."""
    delay = span * float(np.random.default_rng(seed).uniform(0.2, 0.6))
    proc = subprocess.Popen(command, env=_env(), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    workers = set()
    try:
        deadline = time.time() + 300
        while not checkpoints() and proc.poll() is None and time.time() < deadline:
            time.sleep(0.002)
        time.sleep(delay)
        workers = children_of(proc.pid)
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=10)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    deadline = time.time() + 15
    while any(alive(p) for p in workers) and time.time() < deadline:
        time.sleep(0.1)
    return proc.returncode


def test_run_killed_at_a_random_step_resumes_bit_identically(tmp_path):
    """`common practice`: kill -9 at a seeded random moment after a checkpoint, resume, compare (==)."""
    case_path = tmp_path / "c.toml"
    case_path.write_text(CASE, encoding="utf-8")
    def command(folder):
        return [sys.executable, "-m", "kindyn.cli", "run", str(case_path), "--out", str(folder), "--json", "--quiet"]

    stdout, span = _checkpointed_span(command(tmp_path / "straight"), (tmp_path / "straight" / "c.checkpoint.nc").exists)
    straight = json.loads(stdout)
    assert not straight["resumed"]
    out = tmp_path / "killed"
    checkpoint = out / "c.checkpoint.nc"
    rc = _kill_when_checkpointed(command(out), checkpoint.exists, span, seed=13)
    assert rc == -signal.SIGKILL, "the run finished before it was killed"
    assert checkpoint.exists() and not (out / "c.nc").exists()
    with netCDF4.Dataset(checkpoint) as ds:
        killed_at = int(ds.getncattr("step"))
    assert 0 < killed_at < straight["steps"]
    code, resumed, lines = run_cli(case_path, out)
    assert code == 0 and resumed["resumed"], lines
    assert any(f"step {killed_at}" in line for line in lines)  # it said where it resumed
    assert {k: resumed[k] for k in KEYS} == {k: straight[k] for k in KEYS}
    assert not checkpoint.exists()
    a, b = netCDF4.Dataset(tmp_path / "straight" / "c.nc"), netCDF4.Dataset(out / "c.nc")
    with a, b:
        for name in ("time", "magnetic_energy_log", "growth_rate_estimate", "magnetic_energy_spectrum"):
            np.testing.assert_array_equal(a[name][:], b[name][:], err_msg=name)


def test_resume_after_the_time_step_probe(tmp_path):
    """`common practice`: with rk3 on 8^3 the estimator meets the tolerance at t = 29, the time-step
    probe runs there, and the run goes on to t = 31; a resume from any checkpoint, before or after
    the probe, stops where the uninterrupted run stops, with the same error (==)."""
    case = load_case(tmp_path / "c.toml", text=CASE.replace("[run]\n", '[run]\nscheme = "rk3"\n')
                     .replace("checkpoint_seconds = 0.02", "checkpoint_seconds = 1e-9"))
    kept = tmp_path / "kept"
    kept.mkdir()

    class Keeping(Checkpoint):  # keeps a copy of every checkpoint
        saves = 0

        def save(self, case, state):
            super().save(case, state)
            Keeping.saves += 1
            shutil.copy(self.path, kept / f"{Keeping.saves}.nc")

    straight = run_growth(case, checkpoint=Keeping(tmp_path / "x.checkpoint.nc"))
    probe_time = straight.record.estimate_times[int(np.argmax(np.asarray(straight.record.estimate_errors) <= 1e-3))]
    assert probe_time < straight.time  # the run went on after the probe (what this test is about)
    times = {n: netCDF4.Dataset(kept / f"{n}.nc").getncattr("time") for n in range(1, Keeping.saves)}
    after = [n for n, t in times.items() if t > probe_time]
    rng = np.random.default_rng(29)
    picks = [after[0], after[-1], *rng.choice(sorted(set(times) - set(after)), 2, replace=False)]
    for n in picks:
        shutil.copy(kept / f"{n}.nc", tmp_path / "r.checkpoint.nc")
        resumed = run_growth(case, checkpoint=Checkpoint(tmp_path / "r.checkpoint.nc"))
        assert resumed.resumed
        assert (resumed.steps, resumed.time, resumed.stop_reason) == (straight.steps, straight.time, straight.stop_reason)
        assert resumed.estimate == straight.estimate, n
        assert resumed.record.log_energy == straight.record.log_energy


def test_kill_after_the_result_was_written_does_not_recompute(tmp_path, monkeypatch):
    """`common practice`: a kill between the final write and the checkpoint's removal (the removal
    is skipped) leaves a finished checkpoint; the next run rebuilds the result from it without
    stepping (the integration is made to fail if called) and removes it."""
    import kindyn.run as run_module

    case_path = tmp_path / "c.toml"
    case_path.write_text(CASE, encoding="utf-8")
    out = tmp_path / "out"
    with monkeypatch.context() as patch:
        patch.setattr(Checkpoint, "remove", lambda self: None)  # killed before the removal
        code, first, _ = run_cli(case_path, out)
    assert code == 0 and (out / "c.nc").exists() and (out / "c.checkpoint.nc").exists()
    with netCDF4.Dataset(out / "c.checkpoint.nc") as ds:
        assert ds.getncattr("finished")

    def no_stepping(*args, **kwargs):
        raise AssertionError("a finished run was integrated again")

    monkeypatch.setattr(run_module, "_integrate", no_stepping)
    code, again, lines = run_cli(case_path, out)
    assert code == 0 and again["resumed"], lines
    assert {k: again[k] for k in KEYS} == {k: first[k] for k in KEYS}
    for key in ("time_step_error", "grid_dependence_error", "shadow_grid", "shadow_growth_rate", "cutoff_ratio"):
        assert again[key] == first[key], key
    assert not (out / "c.checkpoint.nc").exists()


SWEEP = CASE.replace("Rm = 3.0", "Rm = 3.5") + '[sweep]\n"magnetic.Rm" = [3.0, 3.5]\n'


def test_sweep_killed_at_a_random_step_resumes_bit_identically(tmp_path, capsys):
    """`common practice`: a ``kindyn sweep`` (2 points, 1 worker, checkpoints every 0.02 s) killed
    with its worker at a seeded random moment after a point's checkpoint exists; the re-run resumes
    that point from its checkpoint and the summary and every point's stop time and steps equal an
    uninterrupted sweep's (==). (tests/test_sweep_resume.py kills only the parent, between points.)"""
    case_path = tmp_path / "s.toml"
    case_path.write_text(SWEEP, encoding="utf-8")
    def command(folder):
        return [sys.executable, "-m", "kindyn.cli", "sweep", str(case_path), "--out", str(folder), "--workers", "1",
                "--json", "--quiet"]

    fresh = tmp_path / "fresh"
    stdout, span = _checkpointed_span(command(fresh), lambda: any((fresh / "points").glob("*.checkpoint.nc")))
    uninterrupted = json.loads(stdout)
    killed = tmp_path / "killed"
    points = killed / "points"
    rc = _kill_when_checkpointed(command(killed), lambda: any(points.glob("*.checkpoint.nc")), span, seed=7)
    assert rc == -signal.SIGKILL
    in_flight = {p.name.split(".")[0] for p in points.glob("*.checkpoint.nc")}
    assert in_flight and len(records(killed)) < 2, "the sweep was not killed in the middle of a point"

    code = main(["sweep", str(case_path), "--out", str(killed), "--workers", "1", "--json", "--quiet"])
    resumed = json.loads(capsys.readouterr().out)
    assert code == 0 and not list(points.glob("*.checkpoint.nc"))
    a, b = netCDF4.Dataset(resumed["summary"]), netCDF4.Dataset(uninterrupted["summary"])
    with a, b:
        for name in ("magnetic_Rm", "growth_rate", "growth_rate_error", "frequency", "Rm", "converged"):
            np.testing.assert_array_equal(a[name][:], b[name][:], err_msg=name)
    for identity in records(fresh):
        p, q = (netCDF4.Dataset(folder / "points" / f"{identity}.nc") for folder in (killed, fresh))
        with p, q:
            for key in ("result_time", "result_steps", "result_growth_rate", "result_growth_rate_error"):
                if key in q.ncattrs():
                    assert p.getncattr(key) == q.getncattr(key), (identity, key)
            assert int(p.getncattr("result_resumed")) == (identity in in_flight)
