"""User-defined flows: formula, callable and velocity-file flows and their checks."""

from __future__ import annotations

import re
import textwrap

import netCDF4
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from kindyn.box import Box
from kindyn.cli import main
from kindyn.errors import FlowError, KindynError, ParameterError
from kindyn.flows import make_flow
from kindyn.flows.base import sample_velocity
from kindyn.flows.beltrami import ABCFlow
from kindyn.flows.cellular import GallowayProctorFlow
from kindyn.flows.checks import relative_divergence

# ABC flow as written in kindyn (Dombre et al. 1986, J. Fluid Mech. 167, 353; flows/beltrami.py)
ABC = {"ux": "A*sin(k*z) + C*cos(k*y)", "uy": "B*sin(k*x) + A*cos(k*z)", "uz": "C*sin(k*y) + B*cos(k*x)"}
ABC_MODULE = """
import numpy as np

def abc(x, y, z, t, A=1.0, B=1.0, C=1.0, k=1.0):
    return (A * np.sin(k * z) + C * np.cos(k * y), B * np.sin(k * x) + A * np.cos(k * z),
            C * np.sin(k * y) + B * np.cos(k * x))

def wrong_shape(x, y, z, t):
    return np.zeros((3, 4))

def gradient(x, y, z, t):      # u = grad(-cos x) + (cos y, 0, 0): its solenoidal part is (cos y, 0, 0)
    return (np.sin(x) + np.cos(y) + 0 * z, 0 * x, 0 * x)

def broken(x, y, z, t):
    raise RuntimeError("sensor offline")
"""


@pytest.fixture
def module_dir(tmp_path):
    (tmp_path / "my_flows.py").write_text(ABC_MODULE)
    return tmp_path


@pytest.mark.parametrize("grid", [(8, 8, 8), (7, 9, 10)])
def test_formula_abc_equals_builtin_abc(grid):
    box = Box(grid=grid)
    params = {**ABC, "parameters": {"A": 1.0, "B": 0.7, "C": 0.4, "k": 1.0}}
    f = make_flow("formula", params, box)
    reference = sample_velocity(ABCFlow(1.0, 0.7, 0.4, 1.0), box, 0.0)
    np.testing.assert_allclose(sample_velocity(f, box, 0.0), reference, rtol=0, atol=1e-15)
    assert f.steady and not f.z_independent
    x = np.array([0.1, 2.0]), np.array([1.5, 0.3]), np.array([4.0, 6.0])   # arbitrary points
    np.testing.assert_allclose(f.velocity(*x, 0.0), ABCFlow(1.0, 0.7, 0.4, 1.0).velocity(*x, 0.0), atol=1e-15)


def test_time_dependent_formula_equals_galloway_proctor():
    # Galloway & Proctor 1992, Nature 356, 691 (kindyn's circular form, flows/cellular.py)
    box = Box(grid=(8, 8, 4))
    a, b = "eps*cos(w*t)", "eps*sin(w*t)"
    params = {"ux": f"s*U*cos(y + {b})", "uy": f"s*U*sin(x + {a})", "uz": f"s*U*(cos(x + {a}) + sin(y + {b}))",
              "parameters": {"s": np.sqrt(1.5), "U": 1.0, "eps": 1.0, "w": 1.0}, "period": 2 * np.pi}
    f = make_flow("formula", params, box)
    assert not f.steady and f.z_independent and f.period == 2 * np.pi
    for t in (0.0, 0.3, 2.9):
        np.testing.assert_allclose(sample_velocity(f, box, t), sample_velocity(GallowayProctorFlow(), box, t),
                                   rtol=0, atol=1e-14)


@pytest.mark.parametrize("spec", ["my_flows.py:abc", "my_flows:abc"])
def test_callable_abc_equals_builtin_abc(module_dir, monkeypatch, spec):
    monkeypatch.syspath_prepend(str(module_dir))   # for the "module:function" form
    box = Box(grid=(8, 9, 7))
    f = make_flow("callable", {"function": spec, "steady": True, "parameters": {"B": 0.5}}, box, module_dir)
    np.testing.assert_allclose(sample_velocity(f, box, 0.0), sample_velocity(ABCFlow(1.0, 0.5, 1.0), box, 0.0),
                               rtol=0, atol=1e-15)
    assert f.steady


def test_projection_keeps_the_solenoidal_part(module_dir):
    # Helmholtz: (sin x + cos y, 0, 0) = grad(-cos x) + (cos y, 0, 0); the Leray projection keeps
    # the second part exactly (by hand).
    box = Box(grid=(8, 8, 8))
    f = make_flow("callable", {"function": "my_flows.py:gradient", "divergence": "project", "steady": True}, box,
                  module_dir)
    x, y, z = box.coordinates
    expected = np.stack(np.broadcast_arrays(np.cos(y) + 0 * x + 0 * z, 0 * x * y * z, 0 * x * y * z))
    np.testing.assert_allclose(sample_velocity(f, box, 0.4), expected, rtol=0, atol=1e-14)
    u_hat = np.fft.rfftn(sample_velocity(f, box, 0.4), axes=(1, 2, 3), norm="forward")
    assert relative_divergence(u_hat, box) < 1e-14


def test_callable_failing_at_run_time_is_a_flow_error(module_dir):
    box = Box(grid=(8, 8, 8))
    with pytest.raises(ParameterError):
        make_flow("callable", {"function": "my_flows.py:broken"}, box, module_dir)
    f = make_flow("callable", {"function": "my_flows.py:abc", "period": "none"}, box, module_dir)
    f.sampler.raw = lambda *a: 1 / 0
    with pytest.raises(FlowError, match="ZeroDivisionError"):
        f.velocity(*box.coordinates, 1.0)


# --- velocity files ------------------------------------------------------------------------------

def band_limited(x, y, z, t=0.0):
    """A solenoidal field with modes |m| <= 2 (curl of a trigonometric vector potential)."""
    return (np.cos(2 * y + 0.3) * np.sin(z) + 0.5 * np.cos(z - t) + 0 * x,
            np.sin(x - 1.0) * np.cos(2 * z) + 0.2 * np.sin(2 * x + t) + 0 * y,
            np.cos(x + y) + 0.1 * np.sin(2 * x - y) + 0 * z)


def write_velocity(path, grid, times=None, dims=("x", "y", "z"), endpoint=False, field=band_limited, nan=False):
    box = Box(grid=grid)
    with netCDF4.Dataset(path, "w") as ds:
        coords = {}
        for axis, name in enumerate("xyz"):
            ds.createDimension(name, grid[axis])
            n, L = grid[axis], 2 * np.pi
            values = np.linspace(0, L, n) if endpoint else box.axis(axis)
            ds.createVariable(name, "f8", (name,))[...] = values
            coords[name] = values
        if times is not None:
            ds.createDimension("time", len(times))
            ds.createVariable("time", "f8", ("time",))[...] = times
        x, y, z = box.coordinates
        snapshots = [field(x, y, z, t) for t in (times if times is not None else [0.0])]
        order = ["xyz".index(d) for d in dims]
        for i, name in enumerate(("ux", "uy", "uz")):
            data = np.array([np.broadcast_to(s[i], grid) for s in snapshots])
            data = np.transpose(data, (0, *(1 + o for o in order)))
            if nan:
                data[0, 1, 2, 3] = np.nan
            vdims = (("time",) if times is not None else ()) + tuple(dims)
            ds.createVariable(name, "f8", vdims)[...] = data if times is not None else data[0]
    return path


@pytest.mark.parametrize("file_grid, run_grid", [((8, 8, 8), (8, 8, 8)), ((8, 8, 8), (16, 12, 10)),
                                                 ((7, 9, 8), (12, 12, 12)), ((16, 16, 16), (8, 8, 8))])
def test_velocity_file_round_trip_with_spectral_resampling(tmp_path, file_grid, run_grid):
    # Trigonometric interpolation of a band-limited field is exact (sampling theorem).
    write_velocity(tmp_path / "u.nc", file_grid)
    box = Box(grid=run_grid)
    f = make_flow("velocity-file", {"file": "u.nc"}, box, tmp_path)
    expected = np.stack(np.broadcast_arrays(*band_limited(*box.coordinates)))
    np.testing.assert_allclose(sample_velocity(f, box, 0.0), expected, rtol=0, atol=1e-13)
    assert f.steady


def test_velocity_file_reorders_z_y_x_dimensions(tmp_path):
    write_velocity(tmp_path / "u.nc", (8, 9, 10), dims=("z", "y", "x"))
    box = Box(grid=(8, 9, 10))
    f = make_flow("velocity-file", {"file": "u.nc"}, box, tmp_path)
    expected = np.stack(np.broadcast_arrays(*band_limited(*box.coordinates)))
    np.testing.assert_allclose(sample_velocity(f, box, 0.0), expected, rtol=0, atol=1e-13)


def test_velocity_file_time_series_held_and_looped(tmp_path):
    write_velocity(tmp_path / "u.nc", (8, 8, 8), times=[2.0, 3.0, 4.0])
    box = Box(grid=(8, 8, 8))
    x, y, z = box.coordinates
    snap = [np.stack(np.broadcast_arrays(*band_limited(x, y, z, t))) for t in (2.0, 3.0, 4.0)]
    held = make_flow("velocity-file", {"file": "u.nc"}, box, tmp_path)
    looped = make_flow("velocity-file", {"file": "u.nc", "ends": "loop"}, box, tmp_path)
    assert not held.steady and held.period is None and looped.period == 3.0
    cases = [(held, 0.25, 0.75 * snap[0] + 0.25 * snap[1]), (held, 2.0, snap[2]), (held, 9.0, snap[2]),
             (looped, 2.5, 0.5 * snap[2] + 0.5 * snap[0]), (looped, 3.0 + 1.5, 0.5 * snap[1] + 0.5 * snap[2])]
    for flow, t, expected in cases:
        np.testing.assert_allclose(sample_velocity(flow, box, t), expected, rtol=0, atol=1e-13)
    # off the grid the same interpolation is summed mode by mode
    pts = [np.array([0.3]), np.array([1.1]), np.array([5.0])]
    direct = 0.5 * np.array(band_limited(*pts, 4.0)) + 0.5 * np.array(band_limited(*pts, 2.0))
    np.testing.assert_allclose(np.ravel(looped.velocity(*pts, 2.5)), np.ravel(direct), atol=1e-13)


# --- each bad user flow gets its own clear error (CLI: one line, exit code 2) --------------------

def run_cli(tmp_path, capsys, flow_lines, grid=(8, 8, 8)):
    case = tmp_path / "case.toml"
    case.write_text(textwrap.dedent(f"""
        [domain]
        grid = {list(grid)}
        [flow]
        {flow_lines}
        [magnetic]
        eta = 0.2
        [output]
        figure = false
        """).replace("\n        ", "\n"))
    code = main(["flow", str(case), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err.strip()
    return code, err


@pytest.mark.parametrize("flow_lines, pattern", [
    ('type = "formula"\nux = "sin(x)"\nuy = "0"\nuz = "0"', r"solenoidal flow: \|\|div u\|\|/\|\|grad u\|\| = 1 "),
    ('type = "formula"\nux = "sin(y/3)"\nuy = "0"\nuz = "0"', r"periodic in the box: along y"),
    ('type = "formula"\nux = "log(cos(y))"\nuy = "0"\nuz = "0"', r"finite velocities: \d+ of 1536 values are NaN"),
    ('type = "formula"\nux = "__import__(\'os\').system(\'echo x\')"\nuy = "0"\nuz = "0"',
     r"flow\.ux = .*kindyn's grammar"),
    ('type = "formula"\nux = "sin(3*y)"\nuy = "0"\nuz = "0"', r"domain.grid = .*2/3 rule removes"),
    ('type = "callable"\nfunction = "my_flows.py:wrong_shape"', r"u_x of a shape broadcastable to the grid"),
    ('type = "callable"\nfunction = "my_flows.py:broken"', r"raised RuntimeError at t = 0: sensor offline"),
    ('type = "callable"\nfunction = "missing.py:abc"', r"an existing Python file"),
    ('type = "velocity-file"\nfile = "nan.nc"', r"finite velocities: 3 of 1536 .*u_x at x = 0.7854, y = 1.571, z = 2.356"),
    ('type = "velocity-file"\nfile = "endpoint.nc"', r"periodic grid along x with no endpoint"),
    ('type = "velocity-file"\nfile = "divergent.nc"', r"solenoidal flow"),
    ('type = "velocity-file"\nfile = "u.nc"\nvariables = ["u", "v", "w"]', r"no 'u'"),
    ('type = "velocity-file"\nfile = "flat.nc"', r"ux with dimensions \(x, y, z\) or \(time, x, y, z\)"),
])
def test_bad_user_flows_fail_with_one_clear_line(tmp_path, capsys, module_dir, flow_lines, pattern):
    write_velocity(tmp_path / "u.nc", (8, 8, 8))
    write_velocity(tmp_path / "nan.nc", (8, 8, 8), nan=True)
    write_velocity(tmp_path / "endpoint.nc", (8, 8, 8), endpoint=True)
    write_velocity(tmp_path / "divergent.nc", (8, 8, 8),
                   field=lambda x, y, z, t: (np.sin(x) + 0 * y * z, 0 * x * y * z, 0 * x * y * z))
    with netCDF4.Dataset(tmp_path / "flat.nc", "w") as ds:   # a wrongly shaped file: 2-D components
        ds.createDimension("x", 8)
        ds.createDimension("y", 8)
        for name in ("ux", "uy", "uz"):
            ds.createVariable(name, "f8", ("x", "y"))[...] = np.zeros((8, 8))
    code, err = run_cli(tmp_path, capsys, flow_lines)
    assert code == 2
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    assert err.startswith("kindyn flow: error: ") and "case.toml" in err
    assert re.search(pattern, err), err


@settings(max_examples=60, deadline=None)
@given(st.text(max_size=60))
def test_any_formula_text_builds_a_flow_or_raises_a_kindyn_error(text):
    box = Box(grid=(4, 4, 4))
    try:
        make_flow("formula", {"ux": text, "uy": "0", "uz": "0"}, box)
    except KindynError:
        pass
