"""Benchmark of the distributed step (mpi4py-fft layout) against the bare transforms it needs.

For each grid size n (n^3) and number of processes P (launched with ``mpiexec -n P``):

(a) the bare mpi4py-fft transforms of one classical RK4 step: 4 stages x 3 components x (one
    backward + one unnormalised forward real-to-complex transform), on the same plan the layout uses;
(b) one full step of kindyn's solver on the distributed layout (ABC flow A = B = C = 1, k = 1,
    Rm = 12, CFL time step), the array kernels chosen as the solver chooses them;

and prints (b)/(a) (target <= 1.3), the same ratio for the serial pyfftw engine (P = 1 without MPI:
``scripts/bench_step.py`` measures it in detail), the strong-scaling efficiency of (b) and of (a)
(``t(P=1) / (P t(P))``, from the same run of this script), and the peak resident memory per grid
point per process. Medians of wall-clock times after a warm-up. Ratios, not seconds: the machine is
shared and noisy. This machine has 2 cores, so P = 1, 2 is all it can measure; the script takes any
``--processes`` list for a cluster node.

    python scripts/bench_mpi.py                          # 64^3 and 128^3, P = 1, 2
    python scripts/bench_mpi.py --sizes 128 256 --processes 1 2 4 8
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import time

import numpy as np

RM = 12.0


def parse_args(argv=None):
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--sizes", type=int, nargs="+", default=[64, 128])
    p.add_argument("--processes", type=int, nargs="+", default=[1, 2])
    p.add_argument("--repeats", type=int, default=7)
    p.add_argument("--warmup", type=int, default=2)
    p.add_argument("--json", action="store_true")
    p.add_argument("--worker", action="store_true", help=argparse.SUPPRESS)
    p.add_argument("--size", type=int, help=argparse.SUPPRESS)
    p.add_argument("--serial-engine", action="store_true", help=argparse.SUPPRESS)
    return p.parse_args(argv)


def worker(args) -> dict | None:
    from kindyn.array_kernels import configure_openmp_wait
    from kindyn.assemble import build_solver
    from kindyn.box import Box
    from kindyn.flows.beltrami import ABCFlow
    from kindyn.initial_fields import random_field_hat
    from kindyn.layout import BoxLayout
    from kindyn.timestep import cfl_time_step
    from kindyn.transforms import TransformSettings

    configure_openmp_wait()
    box, flow = Box(grid=(args.size,) * 3), ABCFlow()
    eta = flow.speed / (RM * flow.wavenumber)
    settings = TransformSettings("fftw", 1, "measure", "double", "auto")
    if args.serial_engine:
        layout = BoxLayout(box, settings)
    else:
        from kindyn.layout.distributed_box import DistributedBoxLayout

        layout = DistributedBoxLayout(box, settings)
    h = cfl_time_step(flow, layout, 1.0)
    solver = build_solver(layout, flow, eta, settings)
    b = random_field_hat(layout, 3, 1.0)
    engine = solver.engine

    def transforms():
        for _ in range(4):
            engine.backward()
            engine.forward(normalise=False)

    def step():
        solver.stepper.step(0.0, b, h)

    comm = getattr(getattr(layout, "communicator", None), "comm", None)
    times = {"a": [], "b": []}
    for r in range(args.warmup + args.repeats):
        for key, job in (("a", transforms), ("b", step)):
            if comm is not None:
                comm.Barrier()
            start = time.perf_counter()
            job()
            if comm is not None:
                comm.Barrier()
            if r >= args.warmup:
                times[key].append(time.perf_counter() - start)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    local_points = int(np.prod(layout.physical_shape))
    peaks = layout.maximum(np.array([peak / local_points]))
    if not layout.is_root:
        return None
    return {"size": args.size, "processes": layout.processes, "serial_engine": bool(args.serial_engine),
            "a": float(np.median(times["a"])), "b": float(np.median(times["b"])),
            "peak_bytes_per_point_per_process": float(peaks[0]), "kernels": solver.kernels_used}


def launch(args, size: int, processes: int, serial_engine: bool = False) -> dict:
    command = [sys.executable, os.path.abspath(__file__), "--worker", "--size", str(size), "--repeats",
               str(args.repeats), "--warmup", str(args.warmup)] + (["--serial-engine"] if serial_engine else [])
    if not serial_engine:
        mpiexec = shutil.which("mpiexec")
        if mpiexec is None:
            raise SystemExit("bench_mpi: no mpiexec on PATH (pip install \"kindyn[mpi]\")")
        command = [mpiexec, "-n", str(processes), *command]
    done = subprocess.run(command, capture_output=True, text=True)
    if done.returncode != 0:
        raise SystemExit(f"bench_mpi: {size}^3 on {processes} processes failed:\n{done.stderr.strip()[-2000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    args = parse_args(argv)
    if args.worker:
        result = worker(args)
        if result is not None:
            print(json.dumps(result))
        return 0
    print(f"kindyn distributed-step benchmark: ABC 1:1:1, Rm = {RM:g}, RK4, CFL 1; {os.cpu_count()} cores, "
          f"load {os.getloadavg()[0]:.1f}; medians of {args.repeats} repeats after {args.warmup} warm-up", flush=True)
    rows = []
    for size in args.sizes:
        serial = launch(args, size, 1, serial_engine=True)
        runs = {p: launch(args, size, p) for p in args.processes}
        base = runs.get(1)
        for p, r in runs.items():
            r["b_over_a"] = r["b"] / r["a"]
            r["serial_b_over_a"] = serial["b"] / serial["a"]
            if base is not None:
                r["efficiency_step"] = base["b"] / (p * r["b"])
                r["efficiency_transforms"] = base["a"] / (p * r["a"])
            rows.append(r)
    print(f"{'grid':>6} {'P':>3} {'(a) ms':>9} {'(b) ms':>9} {'(b)/(a)':>8} {'serial (b)/(a)':>15} "
          f"{'eff. step':>10} {'eff. FFTs':>10} {'B/pt/proc':>10}")
    for r in rows:
        print(f"{r['size']:>4}^3 {r['processes']:>3} {1e3 * r['a']:9.2f} {1e3 * r['b']:9.2f} {r['b_over_a']:8.2f} "
              f"{r['serial_b_over_a']:15.2f} {r.get('efficiency_step', float('nan')):10.2f} "
              f"{r.get('efficiency_transforms', float('nan')):10.2f} {r['peak_bytes_per_point_per_process']:10.0f}")
    print("(a): the bare mpi4py-fft transforms of one RK4 step; (b): kindyn's whole step; efficiency t(1)/(P t(P)); "
          "serial (b)/(a): the same ratio with the serial pyfftw engine (no MPI)")
    if args.json:
        print(json.dumps(rows))
    return 0


if __name__ == "__main__":
    sys.exit(main())
