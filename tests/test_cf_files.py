"""Every kind of kindyn output file passes the CF checker with no errors.

The checker is ``cfchecker`` (the NCAS CF compliance checker, PyPI; it needs the udunits2 library,
Debian ``libudunits2-0``), run on one file of each kind: a run record, a flow record, the modes of
a planar and of a box solve, a test-field record, an ensemble summary and a sweep summary (with a
list-valued swept key). Checkpoints are excluded (internal state, not a product). The checker would
download the CF standard name, area type and region tables; the tests use the local excerpts in
``tests/data/cf`` instead (kindyn writes no standard names, area types or region names; the test
below checks that every standard name a file uses is in the excerpt).

Without cfchecker or udunits2 the tests skip, unless ``KINDYN_REQUIRE_CF=1`` (set by CI), when
they fail. Warnings are allowed only from :data:`ACCEPTED_WARNINGS`, each with its reason.
"""

from __future__ import annotations

import contextlib
import io
import os
import re
from pathlib import Path

import netCDF4
import pytest

from kindyn.cli import main
from tests.small_cases import DECAYING_ABC, NO_FIGURE

DATA = Path(__file__).resolve().parent / "data" / "cf"
REQUIRED = os.environ.get("KINDYN_REQUIRE_CF") == "1"

# warning text (regular expression) -> why it is acceptable
ACCEPTED_WARNINGS = {
    r"\(2\.4\): space/time dimensions appear in incorrect order":
        "CF recommends the order T, Z, Y, X; kindyn's fields are (x, y, z) like the solver's arrays and "
        "the velocity files it reads back, and CF allows any order (a recommendation, not a rule)",
}


def _checker():
    try:
        from cfchecker.cfchecks import CFChecker, CFVersion
    except (ImportError, OSError, AssertionError) as exc:  # cfunits raises when udunits2 is missing
        if REQUIRED:
            pytest.fail(f"KINDYN_REQUIRE_CF=1 but the CF checker cannot be loaded: {exc!r}")
        pytest.skip(f"cfchecker or the udunits2 library is not installed ({exc!r})")
    return CFChecker, CFVersion


def check(path) -> dict:
    """``{"ERROR": [...], "WARN": [...], "FATAL": [...]}`` of one file (messages prefixed by scope)."""
    CFChecker, CFVersion = _checker()
    checker = CFChecker(cfStandardNamesXML=str(DATA / "cf-standard-name-table.xml"),
                        cfAreaTypesXML=str(DATA / "area-type-table.xml"),
                        cfRegionNamesXML=str(DATA / "standardized-region-list.xml"),
                        silent=True, version=CFVersion())
    with contextlib.redirect_stdout(io.StringIO()):
        checker.checker(str(path))
    results = checker.results
    found = {"FATAL": [], "ERROR": [], "WARN": []}
    for scope, items in [("global", results["global"]), *results["variables"].items()]:
        for category in found:
            found[category] += [f"{scope}: {message}" for message in items[category]]
    return found


CASE = DECAYING_ABC + NO_FIGURE
PLANAR = """\
[domain]
lengths = ["2*pi", "2*pi", "4*pi"]
grid = [12, 12, 8]
[flow]
type = "roberts"
[magnetic]
eta = 0.2
[modes]
count = 2
kz = [0.5]
fields = 1
[output]
figure = false
"""
TESTFIELD = """\
[domain]
grid = [8, 8, 8]
[flow]
type = "abc"
[magnetic]
Rm = 1.0
[testfield]
modes = [1]
[output]
figure = false
"""
ENSEMBLE = """\
[domain]
grid = [8, 8, 8]
[flow]
type = "random-helical"
k_min = 1
k_max = 2
seed = 20
[magnetic]
eta = 0.5
[run]
tolerance = 0.05
max_time = 20.0
[output]
figure = false
"""
SWEEP = CASE + """\
[sweep]
"magnetic.Rm" = [3.0, 4.0]
"domain.grid" = [[8, 8, 8]]
"""

KINDS = {  # kind -> (case text, command, output file name)
    "run": (CASE, ["run"], "case.nc"),
    "flow": (CASE, ["flow"], "case-flow.nc"),
    "modes-box": (CASE + "[modes]\ncount = 2\nmethod = \"box\"\n", ["modes"], "case-modes.nc"),
    "modes-planar": (PLANAR, ["modes"], "case-modes.nc"),
    "testfield": (TESTFIELD, ["testfield"], "case-testfield.nc"),
    "ensemble": (ENSEMBLE, ["ensemble", "--count", "2"], "case-ensemble.nc"),
    "sweep": (SWEEP, ["sweep", "--workers", "1"], "case-sweep.nc"),
}


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """Every kind's file, written once by its command (``kind -> path``, or the failure)."""
    _checker()  # skip before computing anything
    files = {}
    for kind, (text, command, name) in KINDS.items():
        folder = tmp_path_factory.mktemp(kind)
        case = folder / "case.toml"
        case.write_text(text, encoding="utf-8")
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()) as err:
            quiet = [] if command[0] == "flow" else ["--quiet"]  # (flow shows no progress)
            code = main([command[0], str(case), *command[1:], "--out", str(folder / "out"), *quiet])
        files[kind] = folder / "out" / name if code == 0 else f"exit code {code}: {err.getvalue().strip()}"
    return files


@pytest.mark.parametrize("kind", sorted(KINDS))
def test_file_passes_the_cf_checker(written, kind):
    path = written[kind]
    assert isinstance(path, Path), f"the {kind} command failed: {path}"
    found = check(path)
    assert found["FATAL"] == [] and found["ERROR"] == [], "\n".join(found["FATAL"] + found["ERROR"])
    unexplained = [w for w in found["WARN"] if not any(re.search(p, w) for p in ACCEPTED_WARNINGS)]
    assert unexplained == [], "\n".join(unexplained)


@pytest.mark.parametrize("kind", sorted(KINDS))
def test_file_carries_the_provenance(written, kind):
    path = written[kind]
    assert isinstance(path, Path), f"the {kind} command failed: {path}"
    with netCDF4.Dataset(path) as ds:
        attributes = set(ds.ncattrs())
        assert {"Conventions", "title", "history", "source", "kindyn_version", "kindyn_command", "case_file",
                "case_text", "case_overrides", "case_resolved"} <= attributes
        assert ds.getncattr("Conventions") == "CF-1.8"
        assert ds.getncattr("kindyn_command").startswith(f"kindyn {KINDS[kind][1][0]} ")
        assert "[flow]" in ds.getncattr("case_text")
        names = {var.getncattr("standard_name") for var in ds.variables.values()
                 if "standard_name" in var.ncattrs()}
    table = (DATA / "cf-standard-name-table.xml").read_text(encoding="utf-8")
    assert all(f'<entry id="{name}">' in table for name in names), names


def test_flags_and_texts_of_the_sweep_summary_read_back(written):
    path = written["sweep"]
    assert isinstance(path, Path), path
    with netCDF4.Dataset(path) as ds:
        converged = ds["converged"]
        assert list(converged.getncattr("flag_values")) == [0, 1]
        assert converged.getncattr("flag_meanings") == "not_converged converged"
        assert list(ds["status"][:]) == ["converged", "converged"]  # text read back as strings
        assert list(ds["domain_grid_label"][:]) == ["8x8x8", "8x8x8"]
        assert "domain_grid_label" in ds["growth_rate"].getncattr("coordinates")
        assert "domain_grid " not in ds["growth_rate"].getncattr("coordinates") + " "
