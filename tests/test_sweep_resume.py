"""A sweep killed with SIGKILL in the middle, then re-run: it completes, reuses the finished points,
and its summary equals that of an uninterrupted sweep (issue check).

The sweep runs as a real ``kindyn sweep`` subprocess with 2 local workers; once two points are
recorded, only the *parent* process is killed with SIGKILL (the harder case: nobody tells the
workers). Then:

* every worker process exits by itself within a few seconds (no orphans burning CPU);
* no point record names an incomplete netCDF file;
* the re-run reuses exactly the points recorded before the kill and runs the rest;
* its summary (Rm coordinate, growth rates, errors, statuses) is identical to that of an
  uninterrupted sweep of the same case in another folder (same code and inputs: exact equality).

Runtime: 6-40 s on 2 shared cores, depending on load.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from kindyn.cli import main
from kindyn.output.netcdf import read_dataset
from tests.small_cases import SEEDED_ABC

CASE = SEEDED_ABC + """\
[run]
tolerance = 1e-3
[numerics]
planning = "estimate"
[output]
figure = false
field = false
[sweep]
"magnetic.Rm" = [1.5, 2, 2.5, 3, 3.5, 4, 5, 6]
"""

pytestmark = pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc to find worker processes")


def children_of(pid: int) -> set[int]:
    """All descendants of ``pid`` (from /proc)."""
    parents = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                stat = (entry / "stat").read_text()
            except OSError:
                continue
            parents[int(entry.name)] = int(stat.rsplit(")", 1)[1].split()[1])
    found, frontier = set(), {pid}
    while frontier:
        frontier = {p for p, parent in parents.items() if parent in frontier} - found
        found |= frontier
    return found


def alive(pid: int) -> bool:
    try:
        state = (Path("/proc") / str(pid) / "stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


def records(out: Path) -> set[str]:
    return {p.stem for p in (out / "points").glob("*.json")} if (out / "points").exists() else set()


def test_killed_sweep_resumes_and_matches_an_uninterrupted_one(write_case, tmp_path, capsys):
    path = write_case(CASE)
    killed = tmp_path / "killed"
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
    proc = subprocess.Popen([sys.executable, "-m", "kindyn.cli", "sweep", str(path), "--out", str(killed),
                             "--workers", "2", "--quiet"], env=env, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, start_new_session=True)
    try:
        deadline = time.time() + 120
        while len(records(killed)) < 2 and proc.poll() is None and time.time() < deadline:
            time.sleep(0.05)
        workers = children_of(proc.pid)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=10)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    assert workers, "no worker processes were found"
    deadline = time.time() + 15
    while any(alive(p) for p in workers) and time.time() < deadline:
        time.sleep(0.2)
    assert not any(alive(p) for p in workers), "worker processes outlived the killed sweep"
    done_before = records(killed)  # a point in flight may have finished before its worker noticed
    assert 2 <= len(done_before) < 8, "the sweep was not interrupted in the middle"
    for identity in records(killed):  # a record always names a complete, readable file
        assert read_dataset(killed / "points" / f"{identity}.nc")["attributes"]["result_converged"] in (0, 1)

    code = main(["sweep", str(path), "--out", str(killed), "--workers", "2", "--json", "--quiet"])
    resumed = json.loads(capsys.readouterr().out)
    assert code == 0
    assert {p["identity"] for p in resumed["points"] if p["reused"]} == done_before
    # on 8^3 the points that a resolution criterion flags carry the grid dependence in their error,
    # above the tolerance 1e-3: those are "unconverged", the others "converged"
    assert all(p["status"] == ("unconverged" if p["resolution_warning"] else "converged") for p in resumed["points"])
    assert any(p["status"] == "converged" for p in resumed["points"])

    fresh = tmp_path / "fresh"
    code = main(["sweep", str(path), "--out", str(fresh), "--workers", "2", "--json", "--quiet"])
    uninterrupted = json.loads(capsys.readouterr().out)
    assert code == 0 and not any(p["reused"] for p in uninterrupted["points"])
    a, b = read_dataset(resumed["summary"]), read_dataset(uninterrupted["summary"])
    for name in ("magnetic_Rm", "growth_rate", "growth_rate_error", "frequency", "Rm", "converged"):
        np.testing.assert_array_equal(a[name], b[name], err_msg=name)
    assert list(a["status"]) == list(b["status"]) and list(a["identity"]) == list(b["identity"])
