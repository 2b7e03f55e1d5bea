"""Hostile input (issue 13, classes 1, 2, 3 and 8): each example of the issue is refused with one
line naming the key, before anything is computed or allocated, and with exit code 2.

* sizes: grids and planar grids beyond this machine's memory (the message gives the estimate and
  the machine's memory, :mod:`kindyn.case.budget`), sweep ranges of 1e9 points, ``modes.count``,
  ``numerics.threads``, ``--threads-per-run``;
* degenerate numbers: wavenumbers of 1e308, lengths of 1e-300, ``Rm`` and ``eta`` whose decay
  underflows between samples, a grid that holds only ``k = 0``, negative seeds, a list as flow type;
* what used to escape the one-line path: nesting 1000 deep, a 100000-digit ``--set``, NaN in a
  sweep, a 100000-character key, newlines and U+2028 in values, any unexpected exception;
* sweep and cluster options: a scheduler address that is not one, a missing or foreign scheduler
  file, an unreachable scheduler (timed out), threads beyond the cores of this machine or of the
  Dask workers.

The unknown counts of :mod:`kindyn.case.budget` are compared with the eigen-solver's own bases
(:mod:`kindyn.eigen.basis`), built independently on odd, even and non-cubic grids.
"""

from __future__ import annotations

import json
import re
import time
from pathlib import Path

import pytest

from kindyn.case import budget, load_case, read_config
from kindyn.cli import main
from kindyn.errors import CaseError, clip, escape, one_line

CASES = Path(__file__).resolve().parent.parent / "cases"
ABC = (CASES / "abc-first-window.toml").read_text(encoding="utf-8")


def small(text: str) -> str:
    return text.replace("grid = [24, 24, 24]", "grid = [8, 8, 8]")


def run_cli(argv, capsys):
    code = main(argv)
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    return code, lines, captured


def assert_one_line_error(code, lines, *needles):
    assert code == 2, lines
    assert len(lines) == 1, lines
    assert "Traceback" not in lines[0]
    for needle in needles:
        assert needle in lines[0], (needle, lines[0])


HOSTILE_CASES = [
    # (name, command, case text, extra arguments, needles in the one line)
    ("huge grid", "run", ABC.replace("grid = [24, 24, 24]", "grid = [100000, 100000, 100000]"), [],
     ["domain.grid", "needs about", "PiB", "this machine has"]),
    ("2**31 points on z", "run", ABC.replace("grid = [24, 24, 24]", "grid = [16, 16, 2147483648]"), [],
     ["domain.grid", "needs about", "TiB", "this machine has"]),
    ("huge planar grid", "modes", (CASES / "modes-roberts-planar.toml").read_text(encoding="utf-8")
     .replace("kz = [0.25, 0.5, 0.75, 1.0]", "kz = [0.5]\nplanar_grid = [100000, 100000]"), [],
     ["modes.planar_grid", "needs about", "this machine has"]),
    ("range of 1e9 points (float)", "sweep", small(ABC).replace("Rm = 12.0", "")
     + '[sweep]\n"magnetic.Rm" = { start = 1, stop = 10, count = 1e9 }\n', [], ['sweep."magnetic.Rm".count']),
    ("range of 1e9 points", "sweep", small(ABC).replace("Rm = 12.0", "")
     + '[sweep]\n"magnetic.Rm" = { start = 1, stop = 10, count = 1000000000 }\n', [],
     ['sweep."magnetic.Rm".count', "<= 10000"]),
    ("product of 1e6 points", "sweep", small(ABC).replace("Rm = 12.0", "") + '[sweep]\n"magnetic.Rm" = '
     '{ start = 1, stop = 10, count = 1000 }\n"flow.A" = { start = 1, stop = 2, count = 1000 }\n', [],
     ["sweep", "at most 10000 points"]),
    ("a million eigenvalues", "modes", small(ABC) + "[modes]\ncount = 1000000\n", [], ["modes.count"]),
    ("more eigenvalues than unknowns", "modes", ABC.replace("grid = [24, 24, 24]", "grid = [4, 4, 4]")
     + "[modes]\ncount = 900\n", [], ["modes.count", "unknowns"]),
    ("2**40 threads", "run", small(ABC), ["--set", "numerics.threads=1099511627776"], ["numerics.threads"]),
    ("more threads than cores", "run", small(ABC), ["--set", "numerics.threads=4096"],
     ["numerics.threads", "cores"]),
    ("k = 1e308", "run", ABC.replace("k = 1.0", "k = 1e308"), [], ["flow.k", "1e-100 and 1e100"]),
    ("lengths 1e-300", "run", ABC.replace('lengths = ["2*pi", "2*pi", "2*pi"]', "lengths = [1e-300, 1e-300, 1e-300]"),
     [], ["domain.lengths"]),
    ("Rm = 1e-320", "run", ABC.replace("Rm = 12.0", "Rm = 1e-320"), [], ["magnetic.Rm"]),
    ("Rm whose decay underflows", "run", ABC.replace("Rm = 12.0", "Rm = 1e-20"), [],
     ["magnetic.Rm", "Rm >= ", "underflows"]),
    ("eta = 1e300", "run", ABC.replace("Rm = 12.0", "eta = 1e300"), [], ["magnetic.eta"]),
    ("eta whose decay underflows", "run", ABC.replace("Rm = 12.0", "eta = 1e50"), [],
     ["magnetic.eta", "eta <= ", "underflows"]),
    ("a grid of one point, callable flow", "run", (CASES / "user-callable-corvid-ring.toml").read_text(encoding="utf-8")
     .replace("grid = [16, 16, 16]", "grid = [1, 1, 1]"), [], ["domain.grid", "2/3-rule band"]),
    ("negative seed", "run", ABC.replace("seed = 7", "seed = -1"), [], ["magnetic.seed", ">= 0"]),
    ("a list as flow type", "run", ABC.replace('type = "abc"', 'type = ["abc"]'), [], ["flow.type"]),
    ("arrays 1000 deep", "run", ABC.replace("seed = 7", "seed = " + "[" * 1000 + "]" * 1000), [], ["nested"]),
    ("inline tables 1000 deep", "run", ABC.replace("seed = 7", "seed = " + "{a = " * 1000 + "1" + "}" * 1000), [],
     ["nested"]),
    ("arrays 20 deep", "run", ABC.replace("seed = 7", "seed = " + "[" * 20 + "]" * 20), [], ["nested at most"]),
    ("100000 digits", "run", small(ABC), ["--set", "magnetic.Rm=" + "1" * 100000], ["magnetic.Rm"]),
    ("an integer of 5000 digits in the file", "run", ABC.replace("seed = 7", "seed = " + "7" * 5000), [],
     ["valid TOML"]),
    ("NaN in a sweep", "sweep", small(ABC).replace("Rm = 12.0", "") + '[sweep]\n"magnetic.Rm" = [nan]\n', [],
     ['sweep."magnetic.Rm"', "finite"]),
    ("inf in a sweep range", "sweep", small(ABC).replace("Rm = 12.0", "")
     + '[sweep]\n"magnetic.Rm" = { start = 1, stop = inf, count = 3 }\n', [], ['sweep."magnetic.Rm"']),
    ("a date in a sweep", "sweep", small(ABC).replace("Rm = 12.0", "") + '[sweep]\n"magnetic.Rm" = [1979-05-27]\n',
     [], ['sweep."magnetic.Rm"', "plain values"]),
    ("refine_runs of 1e9", "sweep", small(ABC).replace("Rm = 12.0", "") + '[sweep]\n"magnetic.Rm" = [5, 10]\n'
     "refine_runs = 1000000000\n", [], ["sweep.refine_runs"]),
    ("a 100000-character key", "run", ABC.replace("seed = 7", "seed = 7\n" + "x" * 100000 + " = 1"), [],
     ["magnetic.xxxx", "..."]),
    ("a newline in a value", "run", ABC.replace('name = "abc-first-window"', 'name = "a\\nb/c"'), [],
     ["output.name", "a\\nb/c"]),
    ("line separators in a value", "run", ABC.replace('type = "abc"', 'type = "ab\u2028c\u2029d\u0085e"'), [],
     ["flow.type", "\\u2028", "\\u2029", "\\x85"]),
    ("--count of a million modes", "modes", small(ABC), ["--count", "1000000"], ["--count"]),
    ("--count beyond the unknowns", "modes", ABC.replace("grid = [24, 24, 24]", "grid = [4, 4, 4]"),
     ["--count", "900"], ["--count = 900", "at most 49 eigenvalues", "unknowns"]),
    ("--count of ten million realisations", "ensemble", small(ABC), ["--count", "10000000"], ["--count"]),
    ("--scheduler not-an-address", "sweep", small(ABC).replace("Rm = 12.0", "") + '[sweep]\n"magnetic.Rm" = [5]\n',
     ["--scheduler", "not-an-address"], ["--scheduler", "not-an-address", "host:port"]),
    ("--scheduler with a bad port", "sweep", small(ABC).replace("Rm = 12.0", "") + '[sweep]\n"magnetic.Rm" = [5]\n',
     ["--scheduler", "tcp://127.0.0.1:99999"], ["--scheduler", "port"]),
    ("--grids with 6000 digits", "sweep", small(ABC).replace("Rm = 12.0", "") + '[sweep]\n"magnetic.Rm" = [5]\n',
     ["--grids", "1" * 6000 + ",8"], ["--grids", "12 digits"]),
    ("--threads-per-run 100000", "sweep", small(ABC).replace("Rm = 12.0", "") + '[sweep]\n"magnetic.Rm" = [5]\n',
     ["--threads-per-run", "100000"], ["--threads-per-run", "cores"]),
]


@pytest.mark.parametrize("name,command,text,extra,needles", HOSTILE_CASES, ids=[c[0] for c in HOSTILE_CASES])
def test_hostile_input_is_one_line_exit_2_and_computes_nothing(name, command, text, extra, needles, tmp_path,
                                                             capsys, monkeypatch):
    path = tmp_path / "case.toml"
    path.write_text(text, encoding="utf-8")

    def no_computation(*args, **kwargs):
        raise AssertionError(f"{name}: the case was computed before it was refused")

    for target in ("kindyn.run.run_growth", "kindyn.eigen.solve.solve_modes"):
        monkeypatch.setattr(target, no_computation)
    out = tmp_path / "out"
    started = time.monotonic()
    code, lines, _ = run_cli([command, str(path), "--out", str(out), "--quiet", *extra], capsys)
    assert time.monotonic() - started < 60
    assert_one_line_error(code, lines, *needles)
    assert len(lines[0]) < 1500
    assert not out.exists() or not any(p.suffix in (".nc", ".png", ".part") for p in out.rglob("*"))


def test_the_memory_estimate_refuses_before_allocating(tmp_path, capsys, monkeypatch):
    """A machine of 1 GiB: a 256^3 run (about 4 GiB by the model) is refused with both numbers, and
    neither the box nor the flow is built; a 16^3 run of the same case passes the check."""
    monkeypatch.setattr(budget, "machine_memory", lambda: 2**30)
    path = tmp_path / "case.toml"
    path.write_text(ABC.replace("grid = [24, 24, 24]", "grid = [256, 256, 256]"), encoding="utf-8")

    def no_box(*args, **kwargs):
        raise AssertionError("the box was built before the memory check")

    monkeypatch.setattr("kindyn.case.load.Box", no_box)
    code, lines, _ = run_cli(["run", str(path), "--out", str(tmp_path / "out"), "--quiet"], capsys)
    assert_one_line_error(code, lines, "domain.grid = [256, 256, 256]", "needs about", "GiB",
                          "this machine has 1.0 GiB")
    needed = float(re.search(r"needs about ([0-9.]+) GiB", lines[0]).group(1))
    assert 3.5 <= needed <= 6.0  # 256^3 points x 32 doubles + the interpreter (model of kindyn.case.budget)
    monkeypatch.undo()
    case = load_case(path, ["domain.grid=[16,16,16]"])
    assert case.box.grid == (16, 16, 16)


def test_estimates_grow_with_what_is_stacked_and_differ_by_purpose():
    config = read_config(CASES / "testfield-abc-scale-dependence.toml")
    one = read_config(CASES / "testfield-abc-scale-dependence.toml", ["testfield.modes=[1]"])
    assert budget.estimate(config, "testfield").nbytes > budget.estimate(one, "testfield").nbytes
    run = read_config(CASES / "abc-first-window.toml")
    single = read_config(CASES / "abc-first-window.toml", ['numerics.precision="single"'])
    assert budget.estimate(single, "run").nbytes < budget.estimate(run, "run").nbytes
    many = read_config(CASES / "modes-abc-onset.toml", ["modes.count=400", 'modes.method="box"'])
    few = read_config(CASES / "modes-abc-onset.toml", ['modes.method="box"'])
    assert budget.estimate(many, "modes").nbytes > budget.estimate(few, "modes").nbytes
    assert budget.size_text(23.6 * 2**30, down=True) == "23 GiB" and budget.size_text(47.2 * 2**30) == "48 GiB"


@pytest.mark.parametrize("grid", [(8, 8, 8), (9, 7, 12), (16, 10, 5), (4, 4, 4), (13, 13, 1)])
def test_unknown_counts_match_the_eigen_bases(grid):
    from kindyn.box import Box
    from kindyn.eigen.basis import KzPlaneBasis, SolenoidalBasis
    from kindyn.layout import BoxLayout, KzPlane, KzPlaneLayout

    assert budget.box_unknowns(grid) == SolenoidalBasis(BoxLayout(Box(grid=grid))).size
    layout = KzPlaneLayout(KzPlane((2 * 3.141592653589793,) * 2, grid[:2], 0.5))
    assert budget.plane_unknowns(grid[:2]) == KzPlaneBasis(layout).size


def test_shipped_cases_pass_every_check_for_their_command():
    purposes = {"modes-": "modes", "testfield-": "testfield", "sweep-": "sweep"}
    for path in sorted(CASES.glob("*.toml")):
        name = next((p for prefix, p in purposes.items() if path.name.startswith(prefix)), "run")
        with budget.purpose(name):
            case = load_case(path, ["magnetic.Rm=10"] if name == "sweep" else [])
        assert case.eta > 0 and case.Rm > 0


def test_a_scheduler_file_that_is_not_one(tmp_path, capsys, write_case):
    path = write_case(small(ABC).replace("Rm = 12.0", "") + '[sweep]\n"magnetic.Rm" = [5]\n')
    for name, content in (("garbage.json", "{not json"), ("list.json", "[1, 2]"),
                          ("bad.json", json.dumps({"address": "nowhere"}))):
        (tmp_path / name).write_text(content)
        code, lines, _ = run_cli(["sweep", str(path), "--out", str(tmp_path / "out"), "--quiet", "--scheduler",
                                  str(tmp_path / name)], capsys)
        assert_one_line_error(code, lines, "--scheduler", name)
    code, lines, _ = run_cli(["sweep", str(path), "--out", str(tmp_path / "out"), "--quiet", "--scheduler",
                              str(tmp_path / "missing.json")], capsys)
    assert_one_line_error(code, lines, "--scheduler", "no such file")


def test_an_unreachable_scheduler_times_out_with_one_line(tmp_path, capsys, write_case, monkeypatch):
    import socket

    pytest.importorskip("distributed")
    monkeypatch.setattr("kindyn.sweep.dask_pool.CONNECT_TIMEOUT", 1.0)
    with socket.socket() as s:  # a loopback port nobody listens on once the socket is closed
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    path = write_case(small(ABC).replace("Rm = 12.0", "") + '[sweep]\n"magnetic.Rm" = [5]\n')
    started = time.monotonic()
    code, lines, _ = run_cli(["sweep", str(path), "--out", str(tmp_path / "out"), "--quiet", "--scheduler",
                              f"tcp://127.0.0.1:{port}"], capsys)
    assert time.monotonic() - started < 30
    assert_one_line_error(code, lines, "--scheduler", str(port), "answers within 1 s")


def test_threads_per_run_beyond_the_dask_workers_cores(tmp_path, capsys, write_case):
    distributed = pytest.importorskip("distributed")
    cores = budget.usable_cores()
    path = write_case(small(ABC).replace("Rm = 12.0", "") + '[sweep]\n"magnetic.Rm" = [5]\n')
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, protocol="tcp",
                                  host="127.0.0.1", dashboard_address="127.0.0.1:0") as cluster:
        code, lines, _ = run_cli(["sweep", str(path), "--out", str(tmp_path / "out"), "--quiet", "--scheduler",
                                  cluster.scheduler_address, "--threads-per-run", str(cores + 1)], capsys)
    assert_one_line_error(code, lines, "--threads-per-run", f"({cores})")
    assert not list((tmp_path / "out").glob("points/*.nc"))


@pytest.mark.parametrize("exc,code,needle", [
    (TypeError("unexpected\nlines"), 1, "internal error: TypeError: unexpected\\nlines"),
    (MemoryError(), 1, "out of memory"),
    (RecursionError("maximum recursion depth exceeded"), 2, "nested too deeply"),
    (OverflowError("int too large"), 1, "internal error: OverflowError"),
])
def test_unexpected_exceptions_are_one_line(exc, code, needle, tmp_path, capsys, monkeypatch, write_case):
    import kindyn.commands.run as run_command

    def explode(args):
        raise exc

    monkeypatch.setattr(run_command, "execute", explode)
    monkeypatch.delenv("KINDYN_TRACEBACK", raising=False)
    path = write_case(small(ABC))
    got, lines, _ = run_cli(["run", str(path), "--out", str(tmp_path / "out")], capsys)
    assert got == code and len(lines) == 1 and needle in lines[0] and "Traceback" not in lines[0]


def test_quoted_text_is_clipped_and_escaped():
    assert escape("a\nb\rc\u2028d\u2029e\x00f\x85g\tz") == "a\\nb\\rc\\u2028d\\u2029e\\x00f\\x85g\\tz"
    assert len(clip("x" * 100000)) == 200 and clip("x" * 100000).endswith("...")
    nested = []
    for _ in range(5000):
        nested = [nested]
    message = str(CaseError("f.toml", "k" * 1000, nested, "something"))
    assert "\n" not in message and len(message) < 500
    assert one_line("a\u2028b\nc") == "a\\u2028b\\nc"
    huge = str(CaseError("f.toml", "magnetic.Rm", 10**4000 if False else "9" * 100000, "a number"))
    assert len(huge) < 400


def test_every_command_has_a_purpose_and_a_readme_row():
    """Common practice: every command of ``kindyn --help`` is listed in the README "Commands" table and
    loads its case for the memory estimate of what it computes (closure calibrates test fields)."""
    from kindyn import cli

    readme = (CASES.parent / "README.md").read_text(encoding="utf-8")
    table = readme.split("## Commands", 1)[1].split("Common options", 1)[0]
    for name in cli.COMMANDS:
        assert name in cli.PURPOSES, name
        assert f"| `kindyn {name} CASE.toml" in table, name
    assert cli.PURPOSES["closure"] == "testfield"


def test_closure_is_checked_for_its_test_problems(tmp_path, capsys, monkeypatch):
    """Common practice (and kindyn.case.budget): ``kindyn closure`` is refused on a machine that holds
    the case's growth run but not its stacked test problems, before anything is computed."""
    path = tmp_path / "case.toml"
    path.write_text(small(ABC) + "[testfield]\nmodes = [1, 2]\n", encoding="utf-8")
    config = read_config(path)
    run, tests = budget.estimate(config, "run").nbytes, budget.estimate(config, "testfield").nbytes
    assert run < tests
    monkeypatch.setattr(budget, "machine_memory", lambda: (run + tests) // 2)

    def no_computation(*args, **kwargs):
        raise AssertionError("the closure was computed before the memory check")

    monkeypatch.setattr("kindyn.commands.closure.compare_scales", no_computation)
    code, lines, _ = run_cli(["closure", str(path), "--out", str(tmp_path / "out"), "--quiet"], capsys)
    assert_one_line_error(code, lines, "needs about", "stacked test problems", "this machine has")


@pytest.mark.parametrize("dims", [{"x": 100000, "y": 100000, "z": 100000},
                                  {"time": 100000, "x": 64, "y": 64, "z": 64}])
def test_a_velocity_file_declaring_huge_sizes_is_refused_from_its_header(dims, tmp_path, capsys, monkeypatch):
    """Common practice (kindyn.case.budget): a velocity file whose header declares more values than the
    machine holds (a sparse netCDF-4 file: dimensions declared, fill off, no data written, a few kB on
    disk) is refused with one line naming the file, the variable and its sizes, before any data is read
    (a machine of 1 GiB)."""
    netCDF4 = pytest.importorskip("netCDF4")
    monkeypatch.setattr(budget, "machine_memory", lambda: 2**30)
    with netCDF4.Dataset(tmp_path / "huge.nc", "w") as ds:
        ds.set_fill_off()
        for name, size in dims.items():
            ds.createDimension(name, size)
        for name in ("ux", "uy", "uz"):
            ds.createVariable(name, "f8", tuple(dims), chunksizes=(1,) * (len(dims) - 1) + (64,))
    assert (tmp_path / "huge.nc").stat().st_size < 100_000
    path = tmp_path / "case.toml"
    path.write_text('[domain]\ngrid = [8, 8, 8]\n[magnetic]\neta = 0.1\n[flow]\ntype = "velocity-file"\n'
                    'file = "huge.nc"\n', encoding="utf-8")

    def no_reading(*args, **kwargs):
        raise AssertionError("the velocity file was read before its sizes were checked")

    monkeypatch.setattr("kindyn.flows.velocity_file.read_velocity_file", no_reading)
    started = time.monotonic()
    code, lines, _ = run_cli(["flow", str(path), "--out", str(tmp_path / "out"), "--quiet"], capsys)
    assert time.monotonic() - started < 30
    shape = " x ".join(str(n) for n in dims.values())
    assert_one_line_error(code, lines, 'flow.file = "huge.nc"', f"ux({', '.join(dims)}) of {shape}",
                          "needs about", "this machine has 1.0 GiB")
