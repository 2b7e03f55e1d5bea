"""Fuzz campaign (issue 13, Checks): mutated shipped cases, hostile ``--set`` values and hostile
command-line options for every command, run through the real command line (in this process).

For every generated input:

* the exit code is one of the documented 0, 1, 2 (README "Exit codes");
* nothing on stderr or stdout is a traceback or an "internal error" (the command line's safety net
  for exceptions that escaped: hostile input must be refused by validation, not by the net);
* no input runs longer than :data:`SECONDS_PER_INPUT` (valid inputs are kept cheap: grids of at
  most 16 points per axis, 30 steps, short test-field and eigen-solver budgets, unless the
  mutation targets that very key; hostile sizes must be refused before anything is allocated);
* nothing is left under ``--out`` except complete outputs: no temporaries (``*.part``), and every
  netCDF file there opens.

Hypothesis is seeded and derandomized (the same inputs on every run, no example database), and
bounded: :data:`EXAMPLES` inputs per test in CI (a few hundred in all, about a minute on 2 cores);
set ``KINDYN_FUZZ_EXAMPLES=N`` for N per test (e.g. 2000 for a campaign).
"""

from __future__ import annotations

import contextlib
import datetime
import io
import json
import math
import os
import shutil
import tempfile
import time
import tomllib
from pathlib import Path

import pytest

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from kindyn.case.sections import SECTIONS  # noqa: E402
from kindyn.cli import main  # noqa: E402

CASES = Path(__file__).resolve().parent.parent / "cases"
EXAMPLES = int(os.environ.get("KINDYN_FUZZ_EXAMPLES", "0")) or None
SECONDS_PER_INPUT = 40.0
EXIT_CODES = {0, 1, 2}

FUZZ = settings(max_examples=EXAMPLES or 130, derandomize=True, database=None, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow,
                                       HealthCheck.data_too_large, HealthCheck.filter_too_much],
                print_blob=True)

# ------------------------------------------------------------------------------ the shipped cases

SHIPPED = sorted(p.name for p in CASES.glob("*.toml"))


def commands_for(name: str) -> list[str]:
    if name.startswith("modes-"):
        return ["modes", "flow"]
    if name.startswith("testfield-"):
        return ["testfield", "flow"]
    if name.startswith("sweep-"):
        return ["sweep"]
    if name.startswith("random-helical"):
        return ["run", "ensemble", "flow"]
    return ["run", "flow", "modes"]


# ------------------------------------------------------------------------------ a small TOML writer

def toml_key(key) -> str:
    return json.dumps(str(key))


def toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)  # \uXXXX escapes are TOML escapes too
    if isinstance(value, (datetime.date, datetime.datetime, datetime.time)):
        return value.isoformat()
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{toml_key(k)} = {toml_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(type(value))


def toml_document(data: dict) -> str:
    lines = [f"{toml_key(k)} = {toml_value(v)}" for k, v in data.items() if not isinstance(v, dict)]
    for section, table in data.items():
        if isinstance(table, dict):
            lines.append(f"[{toml_key(section)}]")
            lines += [f"{toml_key(k)} = {toml_value(v)}" for k, v in table.items()]
    return "\n".join(lines) + "\n"


# ------------------------------------------------------------------------------ hostile values

def deep(kind: str, depth: int):
    value: object = 1
    for _ in range(depth):
        value = [value] if kind == "list" else {"a": value}
    return value


NUMBERS = [0, -1, 1, 2, 3, 7, 0.5, 1e-12, 1e-100, 1e-101, 1e-300, 1e-320, 5e-324, 1e100, 1e101, 1e300, 1e308,
           -1e308, float("nan"), float("inf"), float("-inf"), 2**31, 2**31 - 1, 2**40, 2**63 - 1, 2**63, 2**64,
           -(2**63), 10**30, 10**300, 4096, 100000]
STRINGS = ["", "abc", "2*pi", "pi/0", "1e999*pi", "-2*pi", "pi", "nan", "inf", "\n", "a\nb", "\u2028", "\u2029x",
           "x" * 300, "../../etc/passwd", "a\x00b", "rk4", "auto", "box", "planar", "random", "flow", "single",
           "numpy", "fftw", "scipy", "z", "time", "direct", "zip", "growth", "modes", "\U0001F600"]
GRIDS = [[8, 8, 8], [4, 4, 4], [9, 7, 12], [16, 16, 4], [1, 1, 1], [0, 8, 8], [-8, 8, 8], [8, 8], [8, 8, 8, 8],
         [100000, 100000, 100000], [16, 16, 2**31], [8.0, 8, 8], ["8", "8", "8"], [True, 8, 8], [[8], 8, 8],
         [2**63, 8, 8], [3, 3, 3], [13, 13, 13], [100000, 100000]]
LISTS = [[], [1], [1, 2, 3], [0.25, 0.5], [float("nan")], [1e308, 1], ["x"], [[1, 2]], [1] * 2000, [0, 0, 0],
         [-1, 2], [1, 1]]
DATES = [datetime.date(1979, 5, 27), datetime.datetime(1979, 5, 27, 7, 32), datetime.time(7, 32)]

values = st.one_of(
    st.sampled_from(NUMBERS), st.sampled_from(STRINGS), st.booleans(), st.sampled_from(GRIDS),
    st.sampled_from(LISTS), st.sampled_from(DATES),
    st.integers(min_value=-(2**70), max_value=2**70), st.floats(allow_nan=True, allow_infinity=True),
    st.text(st.characters(exclude_categories=["Cs"]), max_size=40),
    st.builds(deep, st.sampled_from(["list", "table"]), st.sampled_from([3, 9, 12, 40])),
    st.dictionaries(st.text(max_size=5), st.integers(-3, 3), max_size=3),
)

KNOWN_KEYS = [(section, key) for section, cls in SECTIONS.items() for key in cls.key_table()]
FLOW_KEYS = ["type", "A", "B", "C", "k", "U", "k_f", "epsilon", "omega", "form", "seed", "period", "function",
             "ux", "uy", "uz", "parameters", "modes", "renewal_time", "bogus"]
JUNK_KEYS = ["", "x" * 1000, "a.b", "\n", "\u00fc", "sweep"]


def sane_values(current):
    """Values near ``current`` (the case's value or the key's default) that are often valid: most
    hostile inputs are refused by the first check, so some mutations must get past it."""
    if isinstance(current, bool):
        return st.sampled_from([current, not current])
    if isinstance(current, int):
        return st.sampled_from([current, current + 1, max(1, current // 2), 2 * current])
    if isinstance(current, float):
        return st.sampled_from([current, 0.5 * current, 2 * current, current + 0.1])
    if isinstance(current, (list, tuple)) and len(current) == 3 and all(isinstance(n, int) for n in current):
        return st.sampled_from([[8, 8, 8], [9, 8, 12], [12, 12, 4], [13, 13, 13], [16, 16, 16]])
    if isinstance(current, (list, tuple)) and current:
        return st.sampled_from([list(current), list(current[:1])])
    if isinstance(current, str):
        return st.sampled_from([current, current.upper(), current + " "])
    return values


def key_default(section: str, key: str):
    spec = SECTIONS[section].key_table().get(key) if section in SECTIONS else None
    default = getattr(spec, "default", None)
    return default if isinstance(default, (bool, int, float, str, tuple, list)) else None


@st.composite
def mutation(draw, data: dict, sane_only: bool = False):
    kinds = ["set", "set", "set", "flow"] if sane_only else ["set", "set", "set", "set", "delete", "section", "flow",
                                                            "sweep"]
    kind = draw(st.sampled_from(kinds))
    if kind in ("set", "flow"):
        if kind == "set":
            section, key = draw(st.sampled_from(KNOWN_KEYS + [("domain", j) for j in JUNK_KEYS]
                                                + [(j, "x") for j in JUNK_KEYS[:3]]))
        else:
            section, key = "flow", draw(st.sampled_from(FLOW_KEYS))
        table = data.get(section) if isinstance(data.get(section), dict) else {}
        current = table.get(key, key_default(section, key))
        sane = current is not None and (sane_only or draw(st.integers(0, 2), label="sane") > 0)
        return ("set", section, key, draw(sane_values(current) if sane else values))
    if kind == "sweep":
        key = draw(st.sampled_from(['magnetic.Rm', 'flow.A', 'domain.grid', 'refine_runs', 'combine', 'critical',
                                    'method', 'refine_width', 'sweep.x', 'magnetic', 'x' * 300]))
        value = draw(st.one_of(values, st.fixed_dictionaries(
            {"start": st.sampled_from(NUMBERS), "stop": st.sampled_from(NUMBERS), "count": st.sampled_from(NUMBERS)})))
        return ("set", "sweep", key, value)
    if kind == "section":
        return ("section", draw(st.sampled_from([*SECTIONS, "flow", "sweep", "bogus"])), None, draw(values))
    present = [(s, k) for s, t in data.items() if isinstance(t, dict) for k in t]
    if not present:
        return ("section", "bogus", None, 1)
    section, key = draw(st.sampled_from(present))
    return ("delete", section, key, None)


def apply(data: dict, mutations) -> set:
    """Apply the mutations to the parsed case ``data``; the dotted keys they touch."""
    touched = set()
    for kind, section, key, value in mutations:
        if kind == "section":
            data[section] = value
            touched.add(section)
            continue
        table = data.get(section)
        if not isinstance(table, dict):
            table = data[section] = {}
        if kind == "delete":
            table.pop(key, None)
        else:
            table[key] = value
        touched.add(f"{section}.{key}")
        touched.add(section)
    return touched


RAW_EDITS = ["none"] * 12 + ["truncate", "garbage", "deep-array", "deep-table", "digits", "duplicate", "bytes",
                            "empty", "bom", "crlf"]


def raw_edit(text: str, edit: str, where: float) -> bytes:
    cut = int(len(text) * where)
    if edit == "truncate":
        return text[:cut].encode()
    if edit == "garbage":
        return (text[:cut] + "\n= ]]][[ \"\n" + text[cut:]).encode()
    if edit == "deep-array":
        return (text + "\n[extra]\nv = " + "[" * 1200 + "]" * 1200 + "\n").encode()
    if edit == "deep-table":
        return (text + "\n[extra]\nv = " + "{a = " * 1200 + "1" + "}" * 1200 + "\n").encode()
    if edit == "digits":
        return text.replace("[magnetic]", "[magnetic]\nseed = " + "9" * 6000, 1).encode()
    if edit == "duplicate":
        return (text + text).encode()
    if edit == "bytes":
        return text.encode()[:cut] + b"\xff\xfe\x80" + text.encode()[cut:]
    if edit == "empty":
        return b""
    if edit == "bom":
        return b"\xef\xbb\xbf" + text.encode()
    if edit == "crlf":
        return text.replace("\n", "\r\n").encode()
    return text.encode()


# ------------------------------------------------------------------------------ running one input

def budget_overrides(command: str, data: dict, touched: set) -> list[str]:
    """``--set`` overrides that keep a valid input cheap, for every key the mutation left alone."""
    wanted = {"numerics.planning": '"estimate"', "output.figure": "false", "run.max_steps": "30",
              "modes.max_restarts": "1", "modes.krylov_dimension": "10", "modes.tolerance": "1e-3",
              "modes.propagation_time": "0.2", "testfield.max_time": "0.3", "testfield.closure": "false",
              "testfield.onset_check": "false", "testfield.solver_tolerance": "1e-6"}
    domain = data.get("domain")
    grid = domain.get("grid") if isinstance(domain, dict) else None
    cap = 16 if command == "testfield" else 12  # the shipped test fields need 13 points (mode 4)
    if isinstance(grid, list) and len(grid) == 3 and all(isinstance(n, int) and not isinstance(n, bool) for n in grid):
        wanted["domain.grid"] = json.dumps([min(n, cap) for n in grid])
    modes = data.get("modes")
    if isinstance(modes, dict) and isinstance(modes.get("kz"), list) and len(modes["kz"]) > 1:
        wanted["modes.kz"] = json.dumps(modes["kz"][:1])
    if command == "sweep":
        wanted['sweep.refine'] = "false"
    out = []
    for key, value in wanted.items():
        section = key.split(".")[0]
        if key in touched or section in touched and not isinstance(data.get(section), dict):
            continue
        out += ["--set", f"{key}={value}"]
    return out


def leftovers(out: Path) -> list[str]:
    """Files under ``out`` that are not complete outputs (temporaries, unreadable netCDF)."""
    bad = []
    if not out.exists():
        return bad
    for path in out.rglob("*"):
        if path.is_dir():
            continue
        name = path.name
        if name.endswith((".part", ".tmp", "~")) or name.startswith((".", "tmp")):
            bad.append(f"temporary left: {path}")
        elif name.endswith(".nc"):
            try:
                import netCDF4

                with netCDF4.Dataset(path):
                    pass
            except Exception as exc:  # noqa: BLE001
                bad.append(f"unreadable netCDF {path}: {exc}")
    return bad


def run_input(argv: list[str], out: Path) -> tuple[int, str, str, float]:
    stdout, stderr = io.StringIO(), io.StringIO()
    started = time.monotonic()
    with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(stderr):
        try:
            code = main(argv)
        except SystemExit as exc:  # argparse: usage errors exit 2, --help exits 0
            code = exc.code if isinstance(exc.code, int) else 2
    return code, stdout.getvalue(), stderr.getvalue(), time.monotonic() - started


LOG = os.environ.get("KINDYN_FUZZ_LOG")  # a file to append one line per input to (for a campaign)


def check(argv, code, out_text, err_text, seconds, out: Path) -> None:
    shown = " ".join(a if len(a) < 80 else a[:77] + "..." for a in argv)
    if LOG:
        last = (err_text.strip().splitlines() or [""])[-1]
        with open(LOG, "a", encoding="utf-8") as stream:
            stream.write(json.dumps({"code": code, "seconds": round(seconds, 2), "argv": shown[:400],
                                     "last": last[:300]}) + "\n")
    assert code in EXIT_CODES, f"exit code {code} for {shown}\n{err_text[-3000:]}"
    for text in (err_text, out_text):
        assert "Traceback (most recent call last)" not in text, f"traceback for {shown}\n{text[-5000:]}"
        assert "internal error" not in text, f"an exception escaped validation for {shown}\n{text[-3000:]}"
    assert seconds < SECONDS_PER_INPUT, f"{seconds:.1f} s for {shown}"
    assert not leftovers(out), leftovers(out)
    if code == 2 and err_text.startswith("kindyn "):
        errors = [line for line in err_text.splitlines() if ": error: " in line]
        assert len(errors) == 1 and len(errors[0]) < 5000, err_text[-3000:]


def quiet(command: str) -> list[str]:
    return [] if command == "flow" else ["--quiet"]  # kindyn flow prints no progress


def case_folder(tmp_path: Path) -> Path:
    folder = Path(tempfile.mkdtemp(dir=tmp_path))
    shutil.copy(CASES / "demo_flows.py", folder / "demo_flows.py")  # the callable case's module
    return folder


# ------------------------------------------------------------------------------ the fuzz tests

@FUZZ
@given(data=st.data())
def test_mutated_case_files(tmp_path, data):
    name = data.draw(st.sampled_from(SHIPPED), label="case")
    command = data.draw(st.sampled_from(commands_for(name)), label="command")
    parsed = tomllib.loads((CASES / name).read_text(encoding="utf-8"))
    nearly_valid = data.draw(st.integers(0, 2), label="profile") == 0  # one sane change, no raw edit
    if nearly_valid:
        mutations = [data.draw(mutation(parsed, sane_only=True), label="mutation")]
    else:
        mutations = data.draw(st.lists(mutation(parsed), min_size=1, max_size=3), label="mutations")
    touched = apply(parsed, mutations)
    try:
        text = toml_document(parsed)
    except TypeError:
        return
    edit = "none" if nearly_valid else data.draw(st.sampled_from(RAW_EDITS), label="raw edit")
    folder = case_folder(tmp_path)
    path = folder / "case.toml"
    path.write_bytes(raw_edit(text, edit, data.draw(st.floats(0, 1), label="where")))
    out = folder / "out"
    argv = [command, str(path), "--out", str(out), *quiet(command), *budget_overrides(command, parsed, touched)]
    if command == "ensemble":
        argv += ["--count", "2"]
    if command == "sweep":
        argv += ["--workers", "1", "--no-figure", "--set", 'sweep."magnetic.Rm"=[5]'] \
            if "sweep" not in touched and "sweep.magnetic.Rm" not in touched else ["--workers", "1", "--no-figure"]
    if data.draw(st.booleans(), label="json"):
        argv.append("--json")
    check(argv, *run_input(argv, out), out)


SET_KEYS = ["magnetic.Rm", "magnetic.eta", "magnetic.seed", "domain.grid", "domain.lengths", "numerics.threads",
            "run.cfl", "run.max_time", "flow.k", "flow.type", "modes.count", "modes.planar_grid", "output.name",
            'sweep."magnetic.Rm"', "sweep.refine_runs", "testfield.modes", "bogus.key", "magnetic", "a..b", "",
            '"quoted', "x" * 500, "\u2028.k", "flow.parameters.k"]
SET_RAW = ["1", "-1", "0", "1e-320", "1e308", "nan", "inf", "-inf", "1" * 5000, "1" * 100000, "[" * 2000,
           "[" * 50 + "]" * 50, "{a = " * 300 + "1" + "}" * 300, '"unterminated', "bare word", "", " ", "true",
           "[1, 2, 3]", "[100000, 100000, 100000]", "[16, 16, 2147483648]", '"a\\nb"', '"\\u2028"', "\u2028",
           "1979-05-27", "0x10", "1_000", "[nan]", "{start = 1, stop = 10, count = 1000000000}", "{}", "='='",
           "2**40", "1099511627776", "\x00", "'literal'", '"""multi\nline"""']


@FUZZ
@given(data=st.data())
def test_hostile_set_values(tmp_path, data):
    name = data.draw(st.sampled_from(["abc-first-window.toml", "modes-roberts-planar.toml",
                                      "testfield-abc-scale-dependence.toml", "user-formula-tidal-mixer.toml"]))
    command = commands_for(name)[0]
    sets = data.draw(st.lists(st.tuples(st.sampled_from(SET_KEYS),
                                        st.one_of(st.sampled_from(SET_RAW),
                                                  st.text(st.characters(exclude_categories=["Cs"]), max_size=30))),
                              min_size=1, max_size=3), label="--set")
    folder = case_folder(tmp_path)
    path = folder / name
    shutil.copy(CASES / name, path)
    out = folder / "out"
    touched = {key.strip('"').split(".")[0] for key, _ in sets} | {key for key, _ in sets}
    argv = [command, str(path), "--out", str(out), *quiet(command),
            *budget_overrides(command, tomllib.loads(path.read_text(encoding="utf-8")), touched)]
    for key, raw in sets:
        argv += ["--set", f"{key}={raw}" if data.draw(st.integers(0, 9), label="with =") else key]
    check(argv, *run_input(argv, out), out)


INT_TEXT = ["0", "-1", "1", "2", "3", "100000", "1" * 5000, "x", "", "1.5", "2**40", "1099511627776"]
SCHEDULERS = ["not-an-address", "tcp://", "tcp://127.0.0.1:0", "tcp://127.0.0.1:99999", "tcp://[::1]:x", "inproc://",
              "foo://h:1", "/nonexistent/scheduler.json", "missing.json", "", " ", "a b:1", "\u2028:1", "x" * 2000,
              "host:8786:1", "FOLDER", "NOT-JSON", "LIST-JSON", "BAD-ADDRESS-JSON", "/dev/null"]
GRIDS_TEXT = ["16", "16,24", "16,16", "0,8", "8x8x8,9x9x9", "8x8,9", "1" * 6000 + ",8", "a,b", "", "100000,200000",
              "16,24,32,48,64," * 100]


@FUZZ
@given(data=st.data())
def test_hostile_command_line_options(tmp_path, data):
    command = data.draw(st.sampled_from(["run", "ensemble", "flow", "modes", "testfield", "sweep"]), label="command")
    name = {"ensemble": "random-helical-ember-convection.toml", "modes": "modes-abc-onset.toml",
            "testfield": "testfield-abc-scale-dependence.toml", "sweep": "sweep-abc-rm.toml"}.get(
        command, "abc-first-window.toml")
    folder = case_folder(tmp_path)
    path = folder / name
    shutil.copy(CASES / name, path)
    (folder / "FOLDER").mkdir()
    (folder / "NOT-JSON").write_text("{not json")
    (folder / "LIST-JSON").write_text("[1]")
    (folder / "BAD-ADDRESS-JSON").write_text(json.dumps({"address": "nowhere"}))
    out = folder / "out"
    options = []
    if command in ("ensemble", "modes"):
        if command == "ensemble" or data.draw(st.booleans(), label="--count given"):
            options += ["--count", data.draw(st.sampled_from(INT_TEXT), label="--count")]
    if command == "sweep":
        for option, choices in (("--workers", INT_TEXT), ("--threads-per-run", INT_TEXT), ("--grids", GRIDS_TEXT),
                                ("--scheduler", SCHEDULERS)):
            if data.draw(st.integers(0, 2), label=f"{option} given") == 0:
                value = data.draw(st.sampled_from(choices), label=option)
                options += [option, str(folder / value) if value.isupper() and option == "--scheduler" else value]
        options += data.draw(st.sampled_from([[], ["--refine"], ["--no-figure"]]), label="flags")
    options += data.draw(st.sampled_from([[], ["--json"], ["--fresh"], ["--bogus"], ["extra-positional"],
                                          ["--set"], ["--out"]]), label="more")
    case = data.draw(st.sampled_from([str(path), str(path), str(path), str(folder / "missing.toml"), str(folder),
                                      "/dev/null", ""]), label="case path")
    budget = budget_overrides(command, tomllib.loads(path.read_text(encoding="utf-8")), set())
    if command == "sweep":
        budget += ["--set", 'sweep."magnetic.Rm"=[5]']
        if "--grids" in options:  # a resolution study runs one point per grid: keep them few and small
            i = options.index("--grids")
            if options[i + 1] not in ("16,24", "16,16") and "x" not in options[i + 1]:
                options[i + 1] = options[i + 1][:8000]
    argv = [command, case, "--out", str(out), *quiet(command), *budget, *options]
    if "--refine" in options:
        argv += ["--set", "sweep.refine_runs=1"]
    check(argv, *run_input(argv, out), out)


SUBPROCESS_INPUTS = [
    ("run", (CASES / "abc-first-window.toml").read_text(encoding="utf-8").replace(
        "grid = [24, 24, 24]", "grid = [100000, 100000, 100000]"), []),
    ("run", (CASES / "abc-first-window.toml").read_text(encoding="utf-8").replace(
        "seed = 7", "seed = " + "[" * 1000 + "]" * 1000), []),
    ("sweep", (CASES / "sweep-abc-rm.toml").read_text(encoding="utf-8"), ["--scheduler", "not-an-address"]),
    ("sweep", (CASES / "sweep-abc-rm.toml").read_text(encoding="utf-8"), ["--scheduler", "NOT-JSON"]),
]


@pytest.mark.parametrize("command,text,extra", SUBPROCESS_INPUTS, ids=["huge-grid", "deep", "address", "file"])
def test_hostile_inputs_in_a_real_process(tmp_path, command, text, extra):
    """The same checks on a real ``python -m kindyn`` process: what an interpreter prints at exit
    (objects finalised after an error, e.g. a half-made Dask client) counts too."""
    import subprocess
    import sys

    path = tmp_path / "case.toml"
    path.write_text(text, encoding="utf-8")
    (tmp_path / "NOT-JSON").write_text("{not json")
    extra = [str(tmp_path / a) if a.isupper() else a for a in extra]
    argv = [command, str(path), "--out", str(tmp_path / "out"), "--quiet", *extra]
    started = time.monotonic()
    result = subprocess.run([sys.executable, "-m", "kindyn", *argv], capture_output=True, text=True,
                            timeout=SECONDS_PER_INPUT, cwd=tmp_path)
    check(argv, result.returncode, result.stdout, result.stderr, time.monotonic() - started, tmp_path / "out")
    assert result.returncode == 2 and len(result.stderr.strip().splitlines()) == 1, result.stderr
