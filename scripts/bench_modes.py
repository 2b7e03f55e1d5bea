"""Benchmark of the eigen-solver (issue 6): ratios, not absolute seconds (shared, noisy machines).

(i)  planar reduction versus 3-D: wall time per time step of the planar solver on an ``n^2`` grid
     (B = b(x, y) exp(i kz z), complex FFTs) against the 3-D solver on ``n^3`` (Roberts flow, the
     same RK4 integrating-factor stepper). Target: ratio >= 20 at n = 64.
(ii) time to the leading eigenvalue of the ABC flow near onset (Rm = 9.5 by default, just above the
     first critical Rm ~ 8.9, from memory): Krylov solve of the propagator (``kindyn.eigen``, leading
     mode only, ARPACK tolerance 1e-7 so that gamma is good to ~1e-7 << 1e-6) against time-stepping to
     convergence (``kindyn.run.run_growth`` with run.tolerance = 1e-6). The two answers are printed
     side by side (they agree to ~1e-8 when both are converged). Target: ratio >= 10.

Usage: ``python scripts/bench_modes.py [--n 64] [--steps 20] [--grid 16] [--rm 9.5] [--skip-2d] [--skip-eigen]``
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np

from kindyn.array_kernels import configure_openmp_wait


def time_per_step(stepper, y, dt, steps) -> float:
    stepper.step(0.0, y, dt)  # warm-up (velocity sampling, exponential factors)
    best = math.inf
    for _ in range(3):
        started = time.perf_counter()
        for n in range(steps):
            stepper.step(n * dt, y, dt)
        best = min(best, (time.perf_counter() - started) / steps)
    return best


def planar_versus_box(n: int, steps: int) -> None:
    from kindyn.box import Box
    from kindyn.assemble import build_kz_plane_solver, build_solver
    from kindyn.flows.cellular import RobertsFlow
    from kindyn.layout import KzPlane
    from kindyn.transforms import TransformSettings

    flow, eta, dt, two_pi = RobertsFlow(), 0.1, 0.01, 2 * math.pi
    rng = np.random.default_rng(0)
    box = Box((two_pi, two_pi, two_pi), (n, n, n))
    solver = build_solver(box, flow, eta, TransformSettings(engine="fftw", planning="measure"))
    y3 = (rng.standard_normal(solver.engine.spectral.shape) * box.dealias_mask).astype(complex)
    t3 = time_per_step(solver.stepper, y3, dt, steps)
    planar = build_kz_plane_solver(KzPlane((two_pi, two_pi), (n, n), 1.0), flow, eta)
    y2 = (rng.standard_normal(planar.engine.spectral.shape) * planar.layout.dealias_mask).astype(complex)
    t2 = time_per_step(planar.stepper, y2, dt, steps * 10)
    print(f"(i) time per RK4 step: 3-D {n}^3 {t3 * 1e3:.2f} ms, planar {n}^2 {t2 * 1e3:.3f} ms; "
          f"ratio 3-D/planar = {t3 / t2:.1f} (target >= 20)")


def eigen_versus_time_stepping(grid: int, rm: float) -> None:
    from kindyn.case.load import validate_case
    from kindyn.eigen.solve import solve_modes
    from kindyn.run import run_growth

    data = {"domain": {"grid": [grid] * 3}, "flow": {"type": "abc"}, "magnetic": {"Rm": rm, "seed": 7},
            "run": {"tolerance": 1e-6, "max_time": 1e5}, "modes": {"count": 1, "tolerance": 1e-7}}
    case = validate_case(data, "<bench>")
    started = time.perf_counter()
    outcome = solve_modes(case, with_fields=False)
    t_eigen = time.perf_counter() - started
    lead = outcome.leading
    print(f"(ii) ABC Rm = {rm:g}, {grid}^3: eigen-solver gamma = {lead.growth_rate:+.9f}, "
          f"omega = {lead.frequency:+.6f}, "
          f"residual {lead.residual:.1e}, {outcome.applications} propagations, {t_eigen:.1f} s", flush=True)
    started = time.perf_counter()
    run = run_growth(case)
    t_run = time.perf_counter() - started
    e = run.estimate
    print(f"     time-stepping gamma = {e.growth_rate:+.9f} +- {e.error:.1e} (converged: {e.converged}, "
          f"{run.stop_reason}), t = {run.time:.5g}, {run.steps} steps, {t_run:.1f} s")
    print(f"     |difference| = {abs(e.growth_rate - lead.growth_rate):.1e}; "
          f"ratio time-stepping/eigen = {t_run / t_eigen:.1f} (target >= 10)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--n", type=int, default=64, help="grid size of part (i) (default 64)")
    parser.add_argument("--steps", type=int, default=10, help="3-D steps timed in part (i) (planar: 10x)")
    parser.add_argument("--grid", type=int, default=16, help="ABC grid of part (ii) (default 16)")
    parser.add_argument("--rm", type=float, default=9.5, help="ABC magnetic Reynolds number of part (ii)")
    parser.add_argument("--skip-2d", action="store_true", help="skip part (i)")
    parser.add_argument("--skip-eigen", action="store_true", help="skip part (ii)")
    args = parser.parse_args()
    configure_openmp_wait()  # as the kindyn command does, before pyfftw or numba start their threads
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        if not args.skip_2d:
            planar_versus_box(args.n, args.steps)
        if not args.skip_eigen:
            eigen_versus_time_stepping(args.grid, args.rm)


if __name__ == "__main__":
    main()
