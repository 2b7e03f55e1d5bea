"""Eigen-solves (``kindyn modes`` and the ``modes`` sweep method) get the run's guards: the rk2
stability limit with its diffusion number, and both resolution criteria.

rk2 (explicit midpoint) has ``R(z) = 1 + z + z^2/2`` (textbook, e.g. Hairer & Wanner, *Solving
Ordinary Differential Equations II*, section IV.2). On the negative real axis ``|R| <= 1`` down to
``z = -2``, but that segment does not matter here: diffusion is integrated exactly (integrating
factor), so the explicit stages see only advection, whose eigenvalues lie near the imaginary axis,
and there ``|R(iy)|^2 = (1 - y^2/2)^2 + y^2 = 1 + y^4/4 > 1`` for every ``y != 0``. A step is stable
only where the exact decay ``exp(-eta k^2 dt)`` outweighs that, which with ``|lambda| <= U |k|``
gives the limit ``ln(1 + Y^4/4) = 2 delta Y^2``, ``delta = eta/(dt U^2)`` (derivation in
:mod:`kindyn.stepping.tableaux`). Before this check the eigen-solve passed no ``delta`` and rk2 was
never checked.
"""

from __future__ import annotations

import math

import pytest

from kindyn.case import load_case
from kindyn.errors import CaseError
from kindyn.output.netcdf import read_dataset
from kindyn.stepping.tableaux import TABLEAUX, stability_function

MODES = """
[domain]
grid = [8, 8, 8]
[flow]
type = "abc"
[magnetic]
Rm = {rm}
[run]
scheme = "{scheme}"
[modes]
count = 1
cfl = 1.0
[numerics]
planning = "estimate"
[output]
figure = false
"""


def test_rk2_amplification_on_the_imaginary_axis():
    for y in (0.1, 0.5, 1.0, 2.0):
        assert abs(stability_function(TABLEAUX["rk2"], 1j * y)) ** 2 == pytest.approx(1 + y ** 4 / 4, rel=1e-12)
    # the damped limit is the root of ln(1 + Y^4/4) = 2 delta Y^2
    delta = 0.04
    Y = TABLEAUX["rk2"].advective_limit(delta)
    assert math.log(1 + Y ** 4 / 4) == pytest.approx(2 * delta * Y ** 2, rel=1e-9)


def test_modes_with_rk2_refuses_a_step_beyond_its_damped_limit():
    # ABC, Rm = 50 on 8^3, modes.cfl = 1: eta/(dt U^2) = 0.04 allows a Courant number of 0.57 only
    from kindyn.eigen.solve import solve_modes

    with pytest.raises(CaseError, match="rk2 stability limit") as info:
        solve_modes(load_case("m.toml", text=MODES.format(rm=50.0, scheme="rk2")), count=1, with_fields=False)
    assert "modes.cfl" in str(info.value) and "diffusion number" in str(info.value)
    # rk4 at the same step is within its imaginary-axis limit (2 sqrt 2) and is not refused here
    from kindyn.eigen.solve import _time_grid
    from kindyn.layout import BoxLayout
    from kindyn.timestep import cfl_time_step, max_speed

    case = load_case("m.toml", text=MODES.format(rm=50.0, scheme="rk4"))
    layout = BoxLayout(case.box)
    _time_grid(case, "steady", cfl_time_step(case.flow, layout, 1.0), max_speed(case.flow, layout))


def test_modes_with_rk2_runs_where_diffusion_damps_the_step():
    # Rm = 4: the same cfl = 1 is inside the damped limit; the leading ABC eigenvalue at 8^3 is
    # -0.14646 (rk4); rk2 at cfl = 1 is off by its O(dt^2) error only (measured -0.14600)
    from kindyn.eigen.solve import solve_modes

    outcome = solve_modes(load_case("m.toml", text=MODES.format(rm=4.0, scheme="rk2")), count=1, with_fields=False)
    assert outcome.leading.growth_rate == pytest.approx(-0.14646, abs=2e-3)


def test_modes_sweep_point_reports_the_diffusive_scale_criterion(tmp_path):
    # ABC at Rm = 4 on 8^3: k_cut l = 2 sqrt(eta/sqrt 3) = 0.76 < 1 (kindyn.diagnostics.resolution);
    # with run.resolution_threshold = 0.5 the spectrum criterion (ratio 0.28) does not trip, so only
    # the diffusive scale flags the point
    from kindyn.sweep.methods import modes_point

    case = load_case("m.toml", ["run.resolution_threshold=0.5"], text=MODES.format(rm=4.0, scheme="rk4"))
    summary = modes_point(case, tmp_path / "point.nc", tmp_path / "point.checkpoint.nc")
    assert summary["resolution_warning"] is True and summary["resolution_flags"] == ["diffusive_scale"]
    assert summary["diffusive_resolution"] == pytest.approx(2 * math.sqrt(0.25 / math.sqrt(3)), rel=1e-6)
    caution = read_dataset(tmp_path / "point.nc")["attributes"]["caution"]
    assert "diffusive scale" in caution and "at the dealiasing cut-off" not in caution
