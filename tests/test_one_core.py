"""One induction operator on layouts: purity, planar = 3-D, test problems stepped = solved directly.

References (outside the code under test):

* Purity is the contract of an ODE right-hand side ``f(t, y)`` (as in scipy's ``solve_ivp``:
  common practice): the same ``(t, y)`` gives the same result, bit for bit, whatever was called
  before — also for renovating flows, whose renewal bookkeeping lives in the stepper.
* The planar reduction is exact (derived): for ``u = u(x, y)`` and ``B = Re[b(x, y) exp(i k_z z)]``,
  ``curl(u x B) = Re[curl_q(u x b) exp(i k_z z)]`` with ``curl_q = (d_x, d_y, i k_z) x``. On a box of
  height ``Lz = 2 pi / k_z`` the field with half-grid coefficients ``b_hat`` on the ``m_z = 1`` plane
  (and zero elsewhere) is ``Re``-free: ``B = sum b_hat exp(i (k_x x + k_y y + k_z z)) + c.c.``, so the
  3-D operator's ``m_z = 1`` plane must equal the planar operator's output at ``k_z``.
* The steady test problem ``0 = P curl(u x (B_T + b)) + eta Lap b`` is the long-time limit of the
  time-stepped one below dynamo onset (derived); the direct solve (GMRES) is independent of the
  stepper, so stepping to steady state must reproduce its EMF.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from kindyn.assemble import build_kz_plane_solver, build_solver, build_test_solver
from kindyn.box import Box
from kindyn.flows import FLOW_TYPES, make_flow
from kindyn.flows.beltrami import ABCFlow
from kindyn.flows.cellular import GallowayProctorFlow, RobertsFlow
from kindyn.induction import InductionOperator
from kindyn.layout import BoxLayout, KzPlane, KzPlaneLayout
from kindyn.testfield import steady
from kindyn.testfield.fields import uniform_test_fields
from kindyn.testfield.problems import TestProblems
from kindyn.transforms import TransformSettings

TWO_PI = 2 * math.pi
ESTIMATE = TransformSettings(planning="estimate")
MY_FLOW = '''
import numpy as np
def velocity(x, y, z, t):
    return (np.sin(z + 0.3 * t) + np.cos(y), np.sin(x) + np.cos(z), np.sin(y) + np.cos(x + 0.3 * t))
'''


def _flow_params(name, tmp_path, box):
    """Parameters that build each registered flow type (time-dependent variants where it has them)."""
    if name == "formula":
        return [{"ux": "sin(z) + cos(y)", "uy": "sin(x) + cos(z)", "uz": "sin(y + 0.5*t) + cos(x)", "period": 4 * math.pi}]
    if name == "callable":
        (tmp_path / "my_flow.py").write_text(MY_FLOW)
        return [{"function": "my_flow.py:velocity", "period": TWO_PI / 0.3}]
    if name == "velocity-file":
        from tests.test_flows_user import write_velocity

        write_velocity(tmp_path / "u.nc", box.grid)
        return [{"file": "u.nc"}]
    if name == "random-helical":
        return [{"k_min": 1, "k_max": 2, "seed": 5},
                {"k_min": 1, "k_max": 2, "seed": 5, "time_dependence": "renovating", "tau": 0.5},
                {"k_min": 1, "k_max": 2, "seed": 5, "time_dependence": "ornstein-uhlenbeck", "tau": 0.5}]
    return [{}]


def _flows(tmp_path):
    box = Box((TWO_PI,) * 3, (9, 8, 10))
    return box, [(name, make_flow(name, p, box, str(tmp_path))) for name in sorted(FLOW_TYPES)
                 for p in _flow_params(name, tmp_path, box)]


def _random_band(rng, operator):
    shape = (operator.shape[0], operator.support.size)
    return rng.standard_normal(shape) + 1j * rng.standard_normal(shape)


def test_every_registered_flow_type_is_covered(tmp_path):
    _, flows = _flows(tmp_path)
    assert {name for name, _ in flows} == set(FLOW_TYPES)


@pytest.mark.parametrize("use", ["3d", "test-field"])
def test_rhs_is_a_pure_function_of_its_arguments_for_every_flow(use, tmp_path, rng):
    # the same (t, y) twice, with other calls in between (other times, other fields), gives the
    # same bits; t = 0.5 is a renewal time of the renovating flow (the old hidden stage state
    # returned two different fields there)
    box, flows = _flows(tmp_path)
    for name, flow in flows:
        layout = BoxLayout(box, ESTIMATE)
        if use == "3d":
            operator = build_solver(layout, flow, 0.1, ESTIMATE).operator
        else:
            fields = uniform_test_fields()
            mean = np.stack([f.physical(layout) for f in fields])
            operator = build_test_solver(layout, flow, 0.1, mean, "box", soca=False).operator
        y = _random_band(rng, operator)
        first = operator.packed(0.5, y, np.empty_like(y)).copy()
        for t in (0.25, 0.5, 0.75, 0.5 - 1e-9, 1.0):
            operator.packed(t, _random_band(rng, operator), np.empty_like(y))
        again = operator.packed(0.5, y, np.empty_like(y))
        assert np.array_equal(first, again), name


def test_planar_rhs_is_a_pure_function_of_its_arguments(rng):
    for flow in (RobertsFlow(), GallowayProctorFlow()):
        operator = build_kz_plane_solver(KzPlane((TWO_PI, TWO_PI), (10, 11), 0.5), flow, 0.2, "rk4", ESTIMATE).operator
        y = _random_band(rng, operator)
        first = operator.packed(0.5, y, np.empty_like(y)).copy()
        operator.packed(0.9, _random_band(rng, operator), np.empty_like(y))
        assert np.array_equal(operator.packed(0.5, y, np.empty_like(y)), first)


@pytest.mark.parametrize("plane, nz", [((12, 12), 4), ((11, 13), 5), ((10, 9), 7)], ids=["even", "odd", "mixed"])
@pytest.mark.parametrize("flow", [RobertsFlow(), GallowayProctorFlow(), RobertsFlow(U=0.7, form="product")],
                         ids=["roberts", "galloway-proctor", "roberts-product"])
def test_planar_operator_equals_the_3d_operator_on_a_box_of_height_two_pi_over_kz(plane, nz, flow, rng):
    kz = 0.6
    box = Box((TWO_PI, 5.0, TWO_PI / kz), (*plane, nz))
    grid = KzPlane(box.lengths[:2], plane, kz)
    planar = InductionOperator(KzPlaneLayout(grid, ESTIMATE), flow, 0.1)
    layout = BoxLayout(box, ESTIMATE)
    full = InductionOperator(layout, flow, 0.1)
    b_hat = np.zeros((3, *layout.spectral_shape), complex)
    plane_values = rng.standard_normal((3, *plane)) + 1j * rng.standard_normal((3, *plane))
    plane_values *= np.broadcast_to(layout.dealias_mask[..., 1], plane)
    b_hat[..., 1] = plane_values
    out3 = np.empty_like(b_hat)
    full(0.37, b_hat, out3)
    b_plane = plane_values[..., None]
    out2 = np.empty_like(b_plane)
    planar(0.37, b_plane, out2)
    scale = np.abs(out2).max()
    np.testing.assert_allclose(out3[..., 1], out2[..., 0], rtol=0, atol=1e-12 * scale)
    others = np.delete(out3, 1, axis=-1)
    assert np.abs(others).max() <= 1e-12 * scale  # a z-independent flow does not couple m_z planes


@pytest.mark.parametrize("grid", [(12, 12, 12), (11, 10, 13)], ids=["even", "odd"])
def test_stepped_test_problems_reach_the_direct_steady_solution(grid):
    # ABC flow well below onset (eta = 1, Rm = 1): stepping b from 0 for 40 diffusion times gives
    # the steady solution up to the scheme's error (slowest decay eta k_1^2 = 1: e^-40 ~ 4e-18; the
    # fixed point of an integrating-factor RK4 step differs from the steady state by O(dt^4):
    # about 1e-9 at dt = 0.02, 16 times less at dt = 0.01)
    box = Box((TWO_PI,) * 3, grid)
    layout = BoxLayout(box, ESTIMATE)
    flow, eta = ABCFlow(1.0, 0.7, 0.4), 1.0
    fields = uniform_test_fields()
    stepped = TestProblems(layout, flow, eta, fields, None)
    b = np.zeros(stepped.shape, complex)
    dt = 0.01
    for n in range(4000):
        stepped.stepper.step(n * dt, b, dt)
    emf_stepped = stepped.emf(0.0, b)
    for j, field in enumerate(fields):
        direct = TestProblems(layout, flow, eta, [field], None)
        b_direct, info = steady.full_solution(direct, tolerance=1e-13)
        emf_direct = direct.emf(0.0, b_direct)[0]
        np.testing.assert_allclose(emf_stepped[j], emf_direct, rtol=0, atol=1e-9 * flow.speed)
