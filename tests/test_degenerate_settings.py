"""Settings that are valid numbers but describe no computable run are one-line case errors (exit 2),
never a hang, a traceback or a result that describes another problem (issue 13, class 2).

Each case below once got through: an all-zero or 1e-300 formula flow ran (the CFL step of a
vanishing flow jumped 1e299 past max_time) and a 1e300 one warned about overflows before a
misleading message; u_rms = 1e300 and tau = 1e-9 hung; a time step of 1e-12 ran silently for half
an hour; a sample interval of 100 ran to t = 100 with max_time = 3; a GMRES tolerance of 2 returned
the SOCA value as "converged"; a sweep over eta and Rm together ran with wrong labels; an ensemble
seed of 2**63 - 1 wrote -2**63 for every member; planar keys of a 3-D eigen-solve, text after an
override's value, an empty --out were silently ignored; a velocity file that is a folder was "not
found", a callable in a non-Python file an AttributeError. That a run cannot measure anything when its
steps cover less than one turnover time, or when no sample falls inside max_time, is `common practice`.
"""

from __future__ import annotations

import pytest

from kindyn.cli import main
from tests.small_cases import DECAYING_ABC, NO_FIGURE

FORMULA = """\
[domain]
grid = [8, 8, 8]
[flow]
type = "formula"
ux = "{a}*cos(y)"
uy = "{a}*sin(x)"
uz = "{a}*(cos(x) + sin(y))"
U = 1.0
k_f = 1.0
[magnetic]
Rm = 2.0
[run]
max_time = 2.0
"""

HELICAL = """\
[domain]
grid = [8, 8, 8]
[flow]
type = "random-helical"
spectrum = "{spectrum}"
k_min = 1.0
k_max = 2.0
u_rms = {u_rms}
seed = {seed}
{extra}
[magnetic]
Rm = 2.0
[run]
tolerance = 1e-2
max_time = 3.0
"""


def helical(spectrum="shell", u_rms=1.0, seed=5, extra=""):
    return HELICAL.format(spectrum=spectrum, u_rms=u_rms, seed=seed, extra=extra) + NO_FIGURE


CASES = [
    # (name, command, case text, extra arguments, needles in the one line)
    ("a zero formula flow", "run", FORMULA.format(a="0") + NO_FIGURE, [], ["flow.U", "not zero everywhere"]),
    ("a 1e-300 formula flow", "run", FORMULA.format(a="1e-300") + NO_FIGURE, [], ["flow.U", "speed scale", "u_rms"]),
    ("a 1e300 formula flow", "run", FORMULA.format(a="1e300") + NO_FIGURE, [], ["flow.ux", "at most 1e+100"]),
    ("u_rms = 1e300", "run", helical(u_rms=1e300), [], ["flow.u_rms", "1e100"]),
    ("slope = 1e308", "run", helical("power-law", extra="slope = 1e308"), [], ["flow.slope"]),
    ("slope = 200", "run", helical("power-law", extra="slope = 200.0"), [], ["flow.slope", "between -50 and 50"]),
    ("an Ornstein-Uhlenbeck tau of 1e-9", "run",
     helical(extra='time_dependence = "ornstein-uhlenbeck"\ntau = 1e-9'), [], ["flow.tau", "turnover time"]),
    ("a renovating tau of 1e-9", "run", helical(extra='time_dependence = "renovating"\ntau = 1e-9'), [],
     ["flow.tau", "turnover time"]),
    ("a time step of 1e-12", "run", DECAYING_ABC + NO_FIGURE, ["--set", "run.time_step=1e-12"],
     ["run.time_step", "turnover time"]),
    ("a time step that never reaches a sample", "run", DECAYING_ABC + NO_FIGURE,
     ["--set", "run.time_step=0.01", "--set", "run.max_steps=200", "--set", "run.sample_interval=5",
      "--set", "run.max_time=10"],
     ["run.time_step", "first sample"]),
    ("a sample interval beyond max_time", "run", DECAYING_ABC + NO_FIGURE,
     ["--set", "run.sample_interval=100", "--set", "run.max_time=3"], ["run.sample_interval", "run.max_time = 3"]),
    ("a GMRES tolerance of 2", "testfield", DECAYING_ABC + NO_FIGURE, ["--set", "testfield.solver_tolerance=2"],
     ["testfield.solver_tolerance", "below 0.01"]),
    ("an eigen-solver tolerance of 10", "modes", DECAYING_ABC + NO_FIGURE, ["--set", "modes.tolerance=10"],
     ["modes.tolerance", "below 0.01"]),
    ("a resolution threshold of 10", "run", DECAYING_ABC + NO_FIGURE, ["--set", "run.resolution_threshold=10"],
     ["run.resolution_threshold", "below 1"]),
    ("settling beyond max_time", "testfield", DECAYING_ABC + NO_FIGURE,
     ["--set", 'testfield.method="time"', "--set", "testfield.settle_time=100", "--set", "testfield.max_time=3"],
     ["testfield.settle_time", "below testfield.max_time = 3"]),
    ("a sweep over eta and Rm together", "sweep", DECAYING_ABC.replace("Rm = 4.0\n", "") + NO_FIGURE
     + '[sweep]\n"magnetic.eta" = [0.5, 1.0]\n"magnetic.Rm" = [1.0, 2.0]\n', ["--workers", "1"],
     ['sweep."magnetic.eta"', "not both"]),
    ("an ensemble whose last seed passes 2**63", "ensemble", helical(seed=2**63 - 1), ["--count", "2"],
     ["flow.seed", "2**63"]),
    ("test-field realisations whose last seed passes 2**63", "testfield",
     helical(seed=2**63 - 1, extra='time_dependence = "renovating"\ntau = 1.0'),
     ["--set", "testfield.realisations=2"], ["flow.seed", "2**63"]),
    ("a seed of 2**63", "run", helical(seed=2**63), [], ["flow.seed", "2**63 - 1"]),
    ("a renovating flow without tau", "run", helical(extra='time_dependence = "renovating"'), [],
     ["flow.tau is missing", "renovating"]),
    ("planar keys for a 3-D solve", "modes", DECAYING_ABC + NO_FIGURE, ["--set", "modes.kz=[0.3]"],
     ["modes.kz", "box"]),
    ("an override with further lines", "run", DECAYING_ABC + NO_FIGURE, ["--set", "magnetic.Rm=3\n[x]"],
     ["--set", "magnetic.Rm", "a single TOML value"]),
    ("an override of an unknown section", "run", DECAYING_ABC + NO_FIGURE, ["--set", "nosuch.key=3"],
     ["--set (over", "nosuch", "a known section"]),
    ("an empty --out", "run", DECAYING_ABC + NO_FIGURE, ["--out", ""], ["--out", "not empty"]),
    ("a velocity file that is a folder", "run", DECAYING_ABC.replace('type = "abc"', 'type = "velocity-file"\nfile = "."')
     + NO_FIGURE, [], ["flow.file", "is a folder"]),
    ("a callable in a file that is not Python", "run", DECAYING_ABC.replace(
        'type = "abc"', 'type = "callable"\nfunction = "./case.toml:f"\nU = 1.0\nk_f = 1.0') + NO_FIGURE, [],
     ["flow.function", "ending in .py"]),
]


@pytest.mark.parametrize("name,command,text,extra,needles", CASES, ids=[c[0] for c in CASES])
def test_degenerate_setting_is_one_line_exit_2(name, command, text, extra, needles, tmp_path, capsys):
    path = tmp_path / "case.toml"
    path.write_text(text, encoding="utf-8")
    code = main([command, str(path), "--out", str(tmp_path / "out"), "--quiet", *extra])
    lines = capsys.readouterr().err.strip().splitlines()
    assert code == 2, lines
    assert len(lines) == 1 and "Traceback" not in lines[0], lines
    for needle in needles:
        assert needle in lines[0], (needle, lines[0])
    assert not list((tmp_path / "out").rglob("*.nc")) if (tmp_path / "out").exists() else True


def test_a_periodic_flow_that_vanishes_at_t0_keeps_its_period(tmp_path):
    """u = sin(t) u_ABC is zero at t = 0 and periodic with P = 2 pi (exact): the declared period is
    accepted, and a period 1 % off is still refused. Before, the period check measured the flow's
    size at t = 0 (zero) and refused every period of such a flow."""
    import math

    from kindyn.case import load_case
    from kindyn.errors import CaseError

    text = FORMULA.format(a="sin(t)").replace("U = 1.0", 'U = 1.0\nperiod = {period!r}') + NO_FIGURE
    case = load_case(tmp_path / "c.toml", text=text.format(period=2 * math.pi))
    assert case.flow.period == pytest.approx(2 * math.pi, rel=1e-15) and not case.flow.steady
    with pytest.raises(CaseError) as info:
        load_case(tmp_path / "c.toml", text=text.format(period=2 * math.pi * 1.01))
    assert info.value.key == "flow.period"
