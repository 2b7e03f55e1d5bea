"""Guards that keep a run from reporting nonsense: unstable steps, impossible limits, unsafe names.

Reference for the stability limit: classical RK4 is stable on the imaginary axis for
|lambda h| <= 2 sqrt 2 (Hairer & Wanner 1996, Solving ODEs II, Springer, section IV.2; from memory),
and the pseudo-spectral advection eigenvalues are bounded by sum_i max|u_i| k_max,i (common practice).
"""

import json

import pytest

from kindyn.cli import main

CASE = """
[domain]
grid = [12, 12, 12]
[flow]
type = "abc"
[magnetic]
Rm = 3.0
[output]
figure = false
field = false
"""


@pytest.fixture
def case(tmp_path):
    path = tmp_path / "guard.toml"
    path.write_text(CASE)
    return path


@pytest.mark.parametrize("override, key, expected", [
    ("run.time_step=0.5", "run.time_step", "stability limit"),
    ("run.cfl=3.0", "run.cfl", "stability limit"),
    ("run.min_time=50", "run.min_time", "at most run.max_time"),
    ('domain.lengths=["pi/0", 1, 1]', "domain.lengths", "positive numbers"),
    ('output.name="../elsewhere"', "output.name", "without folders"),
])
def test_refused_before_computing(case, tmp_path, capsys, override, key, expected):
    code = main(["run", str(case), "--out", str(tmp_path / "o"), "--quiet", "--set", override,
                 "--set", "run.max_time=20"])
    err = capsys.readouterr().err.strip()
    assert code == 2 and len(err.splitlines()) == 1
    assert key in err and expected in err


def test_stable_steps_at_the_limit_are_accepted(case, tmp_path, capsys):
    code = main(["run", str(case), "--out", str(tmp_path / "o"), "--quiet", "--json",
                 "--set", "run.cfl=2.8", "--set", "run.max_time=40"])
    assert code == 0
    assert json.loads(capsys.readouterr().out)["growth_rate"] is not None


def test_max_steps_is_honoured_inside_a_sample_interval(case, tmp_path, capsys):
    # 50 steps per sample; 125 steps cover 1.25 turnover times and end half-way through the third
    # sample interval (steps that cannot cover one turnover time are refused: test_degenerate_settings.py)
    code = main(["run", str(case), "--out", str(tmp_path / "o"), "--quiet", "--json",
                 "--set", "run.time_step=0.01", "--set", "run.sample_interval=0.5", "--set", "run.max_steps=125"])
    result = json.loads(capsys.readouterr().out)
    assert code == 0 and result["steps"] == 125 and result["converged"] is False
    assert "max_steps" in result["stop_reason"]


@pytest.mark.parametrize("override, key", [("modes.time_step=1.0", "modes.time_step"), ("modes.cfl=6", "modes.cfl")])
def test_eigen_solve_refuses_unstable_steps(case, tmp_path, capsys, override, key):
    code = main(["modes", str(case), "--out", str(tmp_path / "o"), "--quiet", "--set", override])
    err = capsys.readouterr().err.strip()
    assert code == 2 and key in err and "stability limit" in err
