"""The array kernels of the step (kindyn/array_kernels) against plain numpy, and their selection.

References (outside kindyn): each kernel is checked against the same operation written directly
with numpy's array arithmetic and fancy indexing (``np.cross``-style component formulas, boolean
masks of the 2/3-rule band). The two kernel sets compute the same arithmetic in the same order, so
they agree to the last bit on the formulas checked here (the tolerance allows one rounding).
Physical checks of both sets (exact decay, phase rotation, exact ABC decay) are parametrised in
tests/test_exact_solutions.py. Grids: even, odd and non-cubic; double and single precision.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from kindyn.box import Box
from kindyn.case import load_case
from kindyn.errors import CaseError
from kindyn.flows import ABCFlow, GallowayProctorFlow
from kindyn.array_kernels import KERNEL_SETS, choose_threads, configure_openmp_wait, make_kernels, numba_available
from kindyn.assemble import build_kz_plane_solver, build_solver
from kindyn.layout import BoxLayout, KzPlane
from kindyn.transforms import TransformSettings

GRIDS = [(8, 8, 8), (9, 9, 9), (12, 10, 7), (7, 12, 10)]
PRECISIONS = {"double": (np.float64, np.complex128, 1e-15), "single": (np.float32, np.complex64, 1e-6)}
SETS = ["numpy"] + (["numba"] if numba_available() else [])
needs_numba = pytest.mark.skipif(not numba_available(), reason="numba is not installed")


def kernel_sets():
    return [make_kernels(name, threads=2) for name in SETS]


def band(box):
    support = BoxLayout(box).band
    mask = np.broadcast_to(box.dealias_mask, box.spectral_shape)
    return support, mask


def random_complex(rng, shape, dtype):
    return (rng.standard_normal(shape) + 1j * rng.standard_normal(shape)).astype(dtype)


def close(a, b, tol):
    scale = max(float(np.max(np.abs(b))), 1e-300)
    return float(np.max(np.abs(a - b))) <= tol * scale


@pytest.mark.parametrize("grid", GRIDS)
def test_band_blocks_are_the_two_thirds_mask_and_the_line_table_indexes_them(grid):
    box = Box(grid=grid)
    support, mask = band(box)
    covered = np.zeros(box.spectral_shape, bool)
    for view in support.full_views(covered[None]):
        assert not view.any()  # disjoint
        view[...] = True
    np.testing.assert_array_equal(covered, mask)
    # packed order of the line table = packed order of the blocks
    full = np.arange(np.prod(box.spectral_shape)).reshape(box.spectral_shape)[None].astype(float)
    packed = support.gather(full, np.empty((1, support.size)))
    lines = support.line_start
    for i, j in zip(*np.nonzero(lines >= 0)):
        s = lines[i, j]
        np.testing.assert_array_equal(packed[0, s:s + support.line_length], full[0, i, j, :support.line_length])
    assert (lines >= 0).sum() * support.line_length == support.size


@pytest.mark.parametrize("precision", sorted(PRECISIONS))
@pytest.mark.parametrize("grid", GRIDS)
def test_cross_product_matches_numpy_formula(grid, precision, rng):
    real, _, tol = PRECISIONS[precision]
    box = Box(grid=grid)
    x, y, z = box.coordinates
    u = tuple(np.asarray(c, real) for c in ABCFlow(1.0, 0.7, 0.4).velocity(x, y, z, 0.0))
    b = rng.standard_normal((3, *box.shape)).astype(real)
    ub = [np.broadcast_to(c, box.shape) for c in u]
    expected = np.stack([ub[1] * b[2] - ub[2] * b[1], ub[2] * b[0] - ub[0] * b[2], ub[0] * b[1] - ub[1] * b[0]])
    for kernels in kernel_sets():
        out = b.copy()
        kernels.cross_in_place(u, out)
        assert close(out, expected, tol), kernels.name


@pytest.mark.parametrize("precision", sorted(PRECISIONS))
@pytest.mark.parametrize("grid", GRIDS)
def test_band_scatter_gather_and_curl_match_masked_numpy(grid, precision, rng):
    real, complex_, tol = PRECISIONS[precision]
    box = Box(grid=grid)
    support, mask = band(box)
    values = random_complex(rng, (3, support.size), complex_)
    reference_full = np.zeros((3, *box.spectral_shape), complex_)
    for view, v in zip(support.full_views(reference_full), support.packed_views(values)):
        view[...] = v
    e_hat = random_complex(rng, (3, *box.spectral_shape), complex_)
    k = [np.broadcast_to(c, box.spectral_shape) for c in box.wavenumbers]
    curl = np.stack([1j * (k[1] * e_hat[2] - k[2] * e_hat[1]), 1j * (k[2] * e_hat[0] - k[0] * e_hat[2]),
                     1j * (k[0] * e_hat[1] - k[1] * e_hat[0])]) * mask
    wavenumbers = tuple(c.astype(real) for c in box.wavenumbers)  # broadcastable, as the operator passes them
    for kernels in kernel_sets():
        full = random_complex(rng, (3, *box.spectral_shape), complex_)  # garbage everywhere first
        kernels.spectral_from_band(support, values, full)
        np.testing.assert_array_equal(full, reference_full)
        packed = kernels.gather(support, full, np.empty_like(values))
        np.testing.assert_array_equal(packed, values)
        out = np.empty_like(values)
        kernels.curl_to_band(support, e_hat, wavenumbers, out)
        back = np.zeros_like(e_hat)
        support.add_to(out, back)
        assert close(back, curl.astype(complex_), tol), kernels.name


@pytest.mark.parametrize("precision", sorted(PRECISIONS))
@pytest.mark.parametrize("grid", GRIDS[:3])
def test_stage_sums_and_step_finish_match_numpy_formulas(grid, precision, rng):
    real, complex_, tol = PRECISIONS[precision]
    box = Box(grid=grid)
    support, _ = band(box)
    size = support.size
    stages = random_complex(rng, (2, 3, size), complex_)
    k, start = random_complex(rng, (3, size), complex_), random_complex(rng, (3, size), complex_)
    final, factor, w0, w1 = (rng.random(size).astype(real) for _ in range(4))
    total0 = random_complex(rng, (3, size), complex_)
    y0 = random_complex(rng, (3, *box.spectral_shape), complex_)
    decay = rng.random(box.spectral_shape).astype(real)
    for kernels in kernel_sets():
        couplings = kernels.prepare_couplings([(0, w0), (1, w1)], real, size)
        total, stage = total0.copy(), np.empty_like(start)
        kernels.stage_sums(total, k, final, False, stage, start, factor, stages, couplings)
        assert close(total, total0 + k * final, tol), kernels.name
        assert close(stage, start * factor + stages[0] * w0 + stages[1] * w1, tol), kernels.name
        kernels.stage_sums(total, k, final, True, None, start, None, stages, None)  # first: overwrite
        assert close(total, k * final, tol), kernels.name
        stage_plain = np.empty_like(start)
        kernels.stage_sums(total, None, None, False, stage_plain, start, None,
                           stages, kernels.prepare_couplings([(1, 0.25)], real, size))
        assert close(stage_plain, start + real(0.25) * stages[1], tol), kernels.name
        y = y0.copy()
        kernels.finish_step(y, decay, total, support)
        expected = y0 * decay
        support.add_to(total, expected)
        assert close(y, expected, tol), kernels.name


@needs_numba
@pytest.mark.parametrize("flow,grid,scheme", [
    (ABCFlow(1.0, 1.0, 1.0), (12, 12, 12), "rk4"),
    (ABCFlow(1.0, 0.6, 0.3), (9, 10, 7), "rk3"),
    (GallowayProctorFlow(polarisation="circular"), (10, 10, 8), "rk4"),
])
def test_whole_steps_agree_between_kernel_sets(flow, grid, scheme, random_field, monkeypatch):
    # 20 steps of the full solver: the compiled kernels (kept on 2 threads, not measured) and the numpy
    # kernels give the same field to round-off
    monkeypatch.setattr("kindyn.assemble.choose_threads", lambda kernels, evaluate: kernels.threads)
    box = Box(grid=grid)
    results = []
    for name in ("numpy", "numba"):
        solver = build_solver(box, flow, 0.1, TransformSettings(threads=2, planning="estimate", array_kernels=name), scheme)
        assert solver.operator.kernels.threads == (2 if name == "numba" else 1)
        b = random_field(box, solver.engine).copy()
        for n in range(20):
            solver.stepper.step(0.05 * n, b, 0.05)
        results.append(b)
    assert close(results[1], results[0], 1e-13)


def test_openmp_wait_is_set_only_where_the_user_did_not_choose():
    environ = {}
    configure_openmp_wait(environ)
    assert environ == {"GOMP_SPINCOUNT": "10000"}
    for chosen in ({"OMP_WAIT_POLICY": "active"}, {"OMP_WAIT_POLICY": "PASSIVE"}, {"GOMP_SPINCOUNT": "5"}):
        environ = dict(chosen)
        configure_openmp_wait(environ)
        assert environ == chosen


class FakeKernels:
    def __init__(self, threads):
        self.threads = threads


@pytest.mark.parametrize("costs,expected", [
    ({1: 3.0, 4: 1.0}, 4),   # threads pay
    ({1: 1.0, 4: 2.5}, 1),   # they do not (small grid, or OpenMP pools that spin against each other)
    ({1: 1.0, 4: 1.0}, 1),   # a tie goes to one thread
])
def test_choose_threads_keeps_the_faster_count(monkeypatch, costs, expected):
    # a fake clock that each evaluation advances by the cost of the current thread count
    clock = {"now": 0.0}
    monkeypatch.setattr("kindyn.array_kernels.time.perf_counter", lambda: clock["now"])
    kernels = FakeKernels(4)
    calls = []

    def evaluate():
        calls.append(kernels.threads)
        clock["now"] += costs[kernels.threads]

    assert choose_threads(kernels, evaluate, repeats=3) == expected == kernels.threads
    assert calls == [1] * 4 + [4] * 4  # one warm-up and three timed calls per candidate
    single = FakeKernels(1)
    assert choose_threads(single, evaluate) == 1 and calls[-1] == 4  # nothing to choose: no calls


def test_kernel_set_names_and_selection():
    assert KERNEL_SETS == ("auto", "numba", "numpy")
    assert make_kernels("numpy").name == "numpy"
    assert make_kernels("auto").name == ("numba" if numba_available() else "numpy")
    with pytest.raises(ValueError, match="unknown kernel set"):
        make_kernels("fortran")


CASE = """
[domain]
grid = [8, 8, 8]
[flow]
type = "abc"
[magnetic]
Rm = 5
[numerics]
array_kernels = {kernels}
"""


def test_case_key_names_the_kernel_set(write_case, monkeypatch):
    case = load_case(write_case(CASE.format(kernels='"numpy"')))
    assert case.numerics.array_kernels == "numpy" and math.isclose(case.eta, 0.2)
    # the kernel set changes how, not what: same identity (checkpoints, sweep points), but on record
    auto = load_case(write_case(CASE.format(kernels='"auto"'), name="auto.toml"))
    assert auto.fingerprint == case.fingerprint
    assert case.resolved["numerics"]["array_kernels"] == "numpy"
    other = load_case(write_case(CASE.format(kernels='"numpy"').replace("Rm = 5", "Rm = 6"), name="other.toml"))
    assert other.fingerprint != case.fingerprint
    with pytest.raises(CaseError, match=r"numerics\.array_kernels.*one of \"auto\", \"numba\", \"numpy\""):
        load_case(write_case(CASE.format(kernels='"fast"')))
    monkeypatch.setattr("kindyn.case.schema.numba_unavailable_reason", lambda: "numba cannot be loaded: test")
    with pytest.raises(CaseError, match=r"numerics\.array_kernels.*numba cannot be loaded: test.*kindyn\[fast\]"):
        load_case(write_case(CASE.format(kernels='"numba"')))


@needs_numba
def test_planar_and_test_field_steppers_agree_between_kernel_sets():
    # the planar reduction (stage sums only) and the unpacked test-field stepper, with each set
    from kindyn.flows import RobertsFlow
    from kindyn.testfield.averaging import ProblemGroup
    from kindyn.testfield.fields import uniform_test_fields

    planar = []
    for name in ("numpy", "numba"):
        solver = build_kz_plane_solver(KzPlane((2 * math.pi,) * 2, (10, 11), 0.5), RobertsFlow(), 0.2,
                                     "rk3", TransformSettings(planning="estimate", array_kernels=name))
        b = np.zeros(solver.engine.spectral.shape, complex)
        b[:, 1, 2, 0], b[:, 9, 1, 0] = (1.0, -0.5j, 0.3), (0.2, 0.4, -1.0)
        for n in range(10):
            solver.stepper.step(0.1 * n, b, 0.1)
        planar.append(b)
    assert close(planar[1], planar[0], 1e-13)
    emf = []
    box = Box(grid=(10, 10, 10))
    for name in ("numpy", "numba"):
        group = ProblemGroup(BoxLayout(box, TransformSettings(planning="estimate", array_kernels=name)),
                             GallowayProctorFlow(), 0.2, uniform_test_fields(), None, "rk4",
                             coefficients=lambda full, soca: {}, kernels=make_kernels(name))
        for n in range(10):
            group.step(0.05 * n, 0.05)
        emf.append(np.concatenate([e.ravel() for e in group.emf(0.5)]))
    assert close(emf[1], emf[0], 1e-13)


def test_timing_probe_leaves_the_operator_as_it_was(rng):
    # the thread measurement must not disturb the evaluation count, nor what the operator returns
    # (rhs(t, y, out) is a pure function of its arguments: there is no state a probe could change)
    box = Box(grid=(8, 8, 8))
    solver = build_solver(box, ABCFlow(), 0.1, TransformSettings(planning="estimate", array_kernels="numpy"))
    operator = solver.operator
    b = random_complex(rng, (3, operator.support.size), np.complex128)
    before = operator.packed(0.7, b, np.empty_like(b)).copy()
    operator.evaluations = 5
    operator.timing_probe()()
    assert operator.evaluations == 5
    assert np.array_equal(operator.packed(0.7, b, np.empty_like(b)), before)
    if numba_available():  # with two threads build_solver runs the probe itself
        solver = build_solver(box, ABCFlow(), 0.1, TransformSettings(threads=2, planning="estimate",
                                                                      array_kernels="numba"))
        assert solver.operator.evaluations == 0


@pytest.mark.parametrize("kernels", SETS)
def test_full_grid_entry_uses_the_band_and_zeroes_the_rest(kernels, rng):
    # operator(t, b_hat, out) = the packed evaluation on the band values of b_hat; values outside the
    # band are ignored and out is zero there (N maps the band into itself)
    box = Box(grid=(9, 10, 8))
    solver = build_solver(box, ABCFlow(1.0, 0.5, 0.8), 0.1, TransformSettings(planning="estimate",
                                                                               array_kernels=kernels))
    operator, support = solver.operator, solver.operator.support
    mask = np.broadcast_to(box.dealias_mask, box.spectral_shape)
    b_hat = random_complex(rng, (3, *box.spectral_shape), np.complex128)
    band_only = b_hat * mask
    out, out_band = np.empty_like(b_hat), np.empty_like(b_hat)
    operator(0.0, b_hat, out)
    operator(0.0, band_only, out_band)
    np.testing.assert_array_equal(out, out_band)
    assert not np.any(out[:, ~mask])
    packed = np.empty((3, support.size), complex)
    operator.packed(0.0, support.gather(b_hat, np.empty_like(packed)), packed)
    np.testing.assert_array_equal(support.gather(out, np.empty_like(packed)), packed)


def test_unpacked_stepper_refuses_a_non_contiguous_state():
    from kindyn.stepping import TABLEAUX, IntegratingFactorStepper

    def rhs(t, y, out):
        out[...] = 0

    stepper = IntegratingFactorStepper(rhs, np.ones((4, 3)), TABLEAUX["rk4"], (2, 4, 3), complex,
                                       make_kernels("numpy"))
    y = np.ones((2, 4, 6), complex)[:, :, ::2]
    with pytest.raises(ValueError, match="C-contiguous"):
        stepper.step(0.0, y, 0.1)
    y = np.ones((2, 4, 3), complex)
    stepper.step(0.0, y, 0.1)
    np.testing.assert_allclose(y, np.exp(-0.1))  # N = 0: exact decay


def test_numba_that_cannot_be_used_falls_back_or_says_why(monkeypatch):
    import sys

    from kindyn.array_kernels import KernelsUnavailable, numba_installed

    if numba_available():  # compiles but fails on the trial input: auto falls back with a reason
        from kindyn.array_kernels.numba_kernels import NumbaKernels

        def broken(self, real_dtype):
            raise RuntimeError("no threading layer")
        monkeypatch.setattr(NumbaKernels, "warm_up", broken)
        fallback = make_kernels("auto", 2)
        assert fallback.name == "numpy" and "no threading layer" in fallback.fallback_reason
        with pytest.raises(KernelsUnavailable, match=r"no threading layer.*numerics\.array_kernels = \"numpy\""):
            make_kernels("numba", 2)
        monkeypatch.undo()
    monkeypatch.setitem(sys.modules, "kindyn.array_kernels.numba_kernels", None)  # import fails
    assert not numba_available()
    fallback = make_kernels("auto")
    assert fallback.name == "numpy"
    assert bool(fallback.fallback_reason) == numba_installed()  # not installed: no note needed
    with pytest.raises(KernelsUnavailable, match="pip install"):
        make_kernels("numba")
