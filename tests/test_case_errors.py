"""Bad case files and bad ``--set`` options: one clear line, exit code 2, never a traceback.

Each row of the table is a small case file (or option) with one mistake; the message must name the
file, the key and what is expected (core issue, item 5: "one clear line naming the file, key, bad
value and what is expected, and a non-zero exit code"). Checked twice: in-process through
``kindyn.cli.main`` and as a real ``kindyn run`` subprocess (no 'Traceback' on stderr, nothing on
stdout even with --json) for one row of each kind. Every failure happens during validation, before
any computation. Runtime: ~8 s (the subprocesses run two at a time).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest

from kindyn.cli import main

GOOD = """\
[domain]
grid = [8, 8, 8]

[flow]
type = "abc"

[magnetic]
Rm = 5.0
"""


def edit(old: str, new: str) -> str:
    assert old in GOOD
    return GOOD.replace(old, new)


# name: (case text or None for a missing file, --set options, expected fragments of the message)
TABLE = {
    "unknown-section": (GOOD + "[domian]\nlengths = [1, 1, 1]\n", [], ["domian", "expected a known section", "domain"]),
    "section-not-a-table": ("magnetic = 3\n" + GOOD.replace("[magnetic]\nRm = 5.0\n", ""), [],
                            ["magnetic = 3", "to be a table of keys"]),
    "unknown-key": (GOOD + "[run]\ncfll = 0.5\n", [], ["run.cfll = 0.5", "expected a key of [run]", "cfl"]),
    "wrong-type-string": (GOOD + "[run]\ncfl = \"fast\"\n", [], ['run.cfl = "fast"', "expected a number"]),
    "wrong-type-bool": (GOOD + "[run]\ncfl = true\n", [], ["run.cfl = True", "expected a number"]),
    "wrong-type-grid": (edit("grid = [8, 8, 8]", "grid = [8, 8, 8.5]"), [],
                        ["domain.grid = [8, 8, 8.5]", "three whole numbers"]),
    "grid-two-entries": (edit("grid = [8, 8, 8]", "grid = [8, 8]"), [], ["domain.grid = [8, 8]", "three whole numbers"]),
    "negative-length": (edit("grid = [8, 8, 8]", "grid = [8, 8, 8]\nlengths = [6.0, -1.0, 6.0]"), [],
                        ["domain.lengths = [6.0, -1.0, 6.0]", "three positive numbers"]),
    "missing-grid": (edit("grid = [8, 8, 8]", "lengths = [6.0, 6.0, 6.0]"), [],
                     ["domain.grid is missing", "grid points [nx, ny, nz]"]),
    "missing-flow": (edit('[flow]\ntype = "abc"\n', ""), [], ["flow is missing", "[flow] section with a type"]),
    "missing-flow-type": (edit('type = "abc"', 'A = 1.0'), [], ["flow.type is missing", '"abc"', '"roberts"']),
    "both-eta-and-Rm": (edit("Rm = 5.0", "Rm = 5.0\neta = 0.2"), [],
                        ["magnetic.eta = 0.2", "exactly one of magnetic.eta and magnetic.Rm"]),
    "neither-eta-nor-Rm": (edit("Rm = 5.0", "seed = 2"), [],
                           ["magnetic is missing", "exactly one of magnetic.eta and magnetic.Rm"]),
    "negative-eta": (edit("Rm = 5.0", "eta = -0.1"), [], ["magnetic.eta = -0.1", "expected a positive number"]),
    "zero-Rm": (edit("Rm = 5.0", "Rm = 0"), [], ["magnetic.Rm = 0", "expected a positive number"]),
    "grid-too-small-for-flow": (edit('type = "abc"', 'type = "abc"\nk = 3.0'), [],
                                ["domain.grid = [8, 8, 8]", "at least 10 points along x", "abc"]),
    "wavenumber-not-periodic": (edit('type = "abc"', 'type = "abc"\nk = 1.5'), [],
                                ["flow.k = 1.5", "fits the box along x", "whole multiple of 2*pi/Lx"]),
    "unknown-flow-type": (edit('"abc"', '"abcd"'), [], ['flow.type = "abcd"', '"abc"', '"galloway-proctor"']),
    "unknown-flow-parameter": (edit('type = "abc"', 'type = "abc"\nD = 1.0'), [],
                               ["flow.D = 1.0", "a parameter of the abc flow", "A, B, C, k"]),
    "flow-parameter-wrong-type": (edit('type = "abc"', 'type = "abc"\nA = "one"'), [],
                                  ['flow.A = "one"', "expected a number"]),
    "flow-choice": (edit('type = "abc"', 'type = "roberts"\nform = "diagonal"'), [],
                    ['flow.form = "diagonal"', "sum", "product"]),
    "numerics-choice": (GOOD + '[numerics]\nprecision = "half"\n', [],
                        ['numerics.precision = "half"', '"double"', '"single"']),
    "malformed-toml": (edit("grid = [8, 8, 8]", "grid = [8, 8, 8"), [], ["valid TOML (", "line 4"]),
    "not-utf8": (b"[domain]\ngrid = [8, 8, 8]\n# \xff\xfe\n", [], ["readable UTF-8 TOML"]),
    "missing-file": (None, [], ["an existing case file (not found)"]),
    "set-without-equals": (GOOD, ["run.cfl"], ["--set", "run.cfl", "section.key=value"]),
    "set-without-section": (GOOD, ["cfl=0.5"], ["--set", "cfl", "dotted key section.key"]),
    "set-into-a-value": (GOOD, ["magnetic.Rm.x=3"], ["--set", "magnetic.Rm.x = 3", "magnetic.Rm to be a section"]),
    "set-unknown-key": (GOOD, ["run.nope=1"], ["run.nope = 1", "expected a key of [run]"]),
    "set-bad-value": (GOOD, ["magnetic.Rm=-3"], ["magnetic.Rm = -3", "expected a positive number"]),
    "set-wrong-type": (GOOD, ["domain.grid=[8, 8, 8.5]"], ["domain.grid = [8, 8, 8.5]", "three whole numbers"]),
}
# the real process for one row of each kind (each start costs ~1-3 s on the shared 2-core machines)
SUBPROCESS_ROWS = ["unknown-section", "wrong-type-string", "missing-grid", "grid-too-small-for-flow",
                   "malformed-toml", "missing-file", "set-without-equals"]
FILE_NOT_NAMED = {"set-without-equals", "set-without-section", "set-into-a-value"}  # named "--set"


def materialise(folder: Path, name: str):
    text, sets, expected = TABLE[name]
    path = folder / f"{name}.toml"
    if isinstance(text, bytes):
        path.write_bytes(text)
    elif text is not None:
        path.write_text(text, encoding="utf-8")
    args = [str(path), "--out", str(folder / "out"), "--json", "--quiet"]
    for option in sets:
        args += ["--set", option]
    return path, args, expected


def check_message(line: str, path: Path, name: str, expected) -> None:
    assert line.startswith("kindyn run: error: "), line
    if name not in FILE_NOT_NAMED:
        assert path.name in line, line
    for fragment in expected:
        assert fragment in line, (fragment, line)


@pytest.mark.parametrize("name", sorted(TABLE))
def test_bad_case_gives_one_line_and_exit_code_2(name, tmp_path, capsys):
    path, args, expected = materialise(tmp_path, name)
    code = main(["run", *args])
    captured = capsys.readouterr()
    assert code == 2
    assert captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1, captured.err
    check_message(lines[0], path, name, expected)
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())  # nothing computed/written


@pytest.fixture(scope="module")
def subprocess_results(tmp_path_factory):
    """The rows of SUBPROCESS_ROWS through a real ``kindyn run`` process (two at a time)."""
    folder = tmp_path_factory.mktemp("bad-cases")
    command = shutil.which("kindyn")
    prefix = [command] if command else [sys.executable, "-m", "kindyn.cli"]
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}

    def run(name):
        path, args, expected = materialise(folder, name)
        done = subprocess.run([*prefix, "run", *args], capture_output=True, text=True, env=env, timeout=120)
        return name, (path, done)

    with ThreadPoolExecutor(max_workers=2) as pool:
        return dict(pool.map(run, SUBPROCESS_ROWS))


@pytest.mark.parametrize("name", SUBPROCESS_ROWS)
def test_bad_case_in_a_subprocess_has_no_traceback(name, subprocess_results):
    path, done = subprocess_results[name]
    assert done.returncode == 2, done.stderr
    assert "Traceback" not in done.stderr
    assert done.stdout == ""
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    check_message(lines[0], path, name, TABLE[name][2])
