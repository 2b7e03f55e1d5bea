"""Benchmark of the full test-field coefficient set (three averaging directions, issue 14).

Times, on an n^3 grid (default 32), the whole calibration that ``kindyn testfield`` runs with
``all_directions = true``, ``uniform = true`` and one wavenumber K = 1 (3 uniform test fields and
3 x 4 sinusoidal ones, each with its SOCA twin: 30 test problems):

(s) a steady flow (ABC, A = B = C = 1, k = 1, Rm = 2): direct steady solves (SOCA by spectral
    division, full by GMRES), with and without the onset check (ARPACK);
(t) a time-periodic flow (circularly polarised Galloway–Proctor, eps = omega = 1, Rm = 1): time
    stepping over whole periods to the default tolerance (1e-3), with the per-step cost of all 30
    stacked test problems relative to 30 x one run step of the same flow on the same grid
    (:func:`kindyn.assemble.build_solver`; the target of the one-core issue is <= 1.3 per problem).

Wall-clock seconds are printed with the machine's load average beside them (the machines are
shared: compare ratios, repeat when the load is high).

    python scripts/bench_testfield.py                  # 32^3
    python scripts/bench_testfield.py --size 24 --threads 2
"""

from __future__ import annotations

import argparse
import os
import time

from kindyn.array_kernels import configure_openmp_wait

STEADY = """
[domain]
grid = [{n}, {n}, {n}]
[flow]
type = "abc"
[magnetic]
Rm = 2.0
[numerics]
threads = {threads}
[testfield]
modes = [1]
all_directions = true
onset_check = {check}
"""
PERIODIC = """
[domain]
grid = [{n}, {n}, {n}]
[flow]
type = "galloway-proctor"
[magnetic]
Rm = 1.0
[numerics]
threads = {threads}
[testfield]
modes = [1]
all_directions = true
"""


def run_step_seconds(case, repeats: int = 20) -> float:
    """Median wall time of one run step (the run's solver, CFL step) of ``case``."""
    import numpy as np

    from kindyn.assemble import build_solver, make_box_layout, transform_settings
    from kindyn.initial_fields import random_field_hat
    from kindyn.timestep import cfl_time_step

    layout = make_box_layout(case.box, transform_settings(case.numerics, precision="double"), case.numerics)
    solver = build_solver(layout, case.flow, case.eta, layout.transforms, case.run.scheme)
    b = random_field_hat(layout, 1, case.flow.wavenumber).astype(layout.complex_dtype)
    dt = cfl_time_step(case.flow, layout, case.run.cfl)
    times, t = [], 0.0
    for i in range(repeats + 2):
        start = time.perf_counter()
        solver.stepper.step(t, b, dt)
        if i >= 2:
            times.append(time.perf_counter() - start)
        t += dt
    return float(np.median(times))


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--size", type=int, default=32, help="grid size n (n^3)")
    p.add_argument("--threads", type=int, default=os.cpu_count() or 1, help="FFTW threads")
    args = p.parse_args(argv)
    configure_openmp_wait()
    from kindyn.case import load_case
    from kindyn.testfield.calibration import calibrate

    n, threads = args.size, args.threads
    print(f"three-direction test-field set at {n}^3, {threads} thread(s); load average "
          f"{os.getloadavg()[0]:.2f} at start")
    for check in ("false", "true"):
        case = load_case("steady.toml", [], text=STEADY.format(n=n, threads=threads, check=check))
        start = time.perf_counter()
        r = calibrate(case)
        wall = time.perf_counter() - start
        print(f"(s) steady ABC, direct solves, onset check {check:5s}: {wall:8.2f} s "
              f"(max GMRES residual {r.solver['max_relative_residual']:.1e}; load {os.getloadavg()[0]:.2f})")
    case = load_case("periodic.toml", [], text=PERIODIC.format(n=n, threads=threads))
    start = time.perf_counter()
    r = calibrate(case)
    wall = time.perf_counter() - start
    outcome = r.time_outcome
    problems = 2 * (3 + 3 * 4)
    per_step = outcome.wall_seconds / outcome.steps
    run_step = run_step_seconds(case)
    print(f"(t) Galloway-Proctor, time stepping:               {wall:8.2f} s ({outcome.steps} steps to t = "
          f"{outcome.time:.4g}, {'converged' if r.converged else 'NOT converged: ' + r.stop_reason}; load "
          f"{os.getloadavg()[0]:.2f})")
    print(f"    one step of the {problems} stacked test problems: {per_step * 1e3:.2f} ms (EMF sampling included); "
          f"one run step: {run_step * 1e3:.3f} ms; per problem / run step = {per_step / (problems * run_step):.2f} "
          "(target <= 1.3)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
