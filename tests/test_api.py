"""The library entry points (kindyn.api, exported by the package) against the command line.

Physical reference: the 1:1:1 ABC flow at Rm = 12 lies inside its first dynamo window
(8.9 < Rm < 17.5: Arnold & Korkina 1983, Vestn. Mosk. Univ. Mat. Mekh. 3, 43; Galloway & Frisch
1986, Geophys. Astrophys. Fluid Dyn. 36, 53; both recalled from memory), so the growth rate is
positive; the library and the command must give the same number from the same case.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

import kindyn
from kindyn.errors import CaseError

CASES = Path(__file__).resolve().parent.parent / "cases"


def test_entry_points_are_exported_without_loading_heavy_libraries():
    code = ("import sys, kindyn; names = sorted(kindyn.__all__); "
            "print(' '.join(names)); print(' '.join(m for m in ('matplotlib', 'numba', 'netCDF4', 'pyfftw') "
            "if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.splitlines()
    assert out[0].split() == ["__version__", "closure", "coefficients", "eigenmodes", "flow_statistics", "growth",
                              "load_case", "parameter_sweep"]
    assert out[1:] == [] or out[1].split() == []
    for name in kindyn.__all__[1:]:
        assert callable(getattr(kindyn, name)) and getattr(kindyn, name).__doc__


def test_library_run_equals_the_command_and_grows_inside_the_window(tmp_path):
    case = kindyn.load_case(CASES / "abc-first-window.toml")
    outcome = kindyn.growth(case)
    assert outcome.estimate.converged and outcome.estimate.growth_rate > 0
    assert kindyn.growth is kindyn.api.growth  # not shadowed by the kindyn.run subpackage
    done = subprocess.run([sys.executable, "-m", "kindyn", "run", str(CASES / "abc-first-window.toml"), "--out",
                           str(tmp_path), "--json", "--quiet"], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    summary = json.loads(done.stdout)
    # two processes may choose different FFTW plans and kernel threads (measured), which changes
    # the last bits of every step: equal to far below the reported error, not bit for bit
    assert summary["growth_rate"] == pytest.approx(outcome.estimate.growth_rate, rel=1e-6)
    assert summary["growth_rate_error"] == pytest.approx(outcome.estimate.error, rel=1e-3)


def test_library_errors_are_case_errors():
    with pytest.raises(CaseError) as info:
        kindyn.load_case(CASES / "abc-first-window.toml", overrides=["run.cfl=-1"])
    assert info.value.key == "run.cfl"
