"""Benchmark of one time step of kindyn's solver (see design.md, section 4).

For each grid size and precision, in fresh subprocesses (so that peak memory is per size):

(a) the bare FFTs one classical RK4 step needs: 4 stages x (one batched 3-component inverse + one
    batched 3-component forward transform), with the engine and plans kindyn's solver uses, called
    as the induction operator calls them;
(b) one full step of kindyn's solver (:func:`kindyn.run.build_solver`, ABC flow A = B = C = 1,
    k = 1, Rm = 12, CFL time step; ``IntegratingFactorStepper.step``), with the array kernels of
    ``--array-kernels`` (default auto: numba when installed) and, beside it, (b') with the numpy kernels;
(c) the same step written plainly with numpy.fft (:class:`PlainStep` below: irfftn/rfftn, cross
    product, curl, 2/3 mask, Lawson RK4 with exponential factors, allocating as plain code does);
(d) one step of the full set of test problems of the test-field method for one wavenumber
    (3 uniform test fields with the box mean removed, 4 sinusoidal ones along z at K = 1 with the
    planar means removed; full problems, stacked in two solvers that share the run's operator and
    kernels), reported as (d) / (7 x (b)): the cost per test problem relative to one run step.

It prints the median wall-clock times (after a warm-up; a, b and c are interleaved so that other
load on a shared machine hits them alike), the ratios (b)/(a) and (c)/(b) of the medians and of the
best repeats, the largest difference between (b) and (c) after one step from the same field
(relative to the field), and the peak resident memory (``ru_maxrss``) per grid point of a process
that builds kindyn's solver (or the plain step) and takes two steps: in total, and above the same
process after its imports. Ratios, not seconds: machines are shared and noisy. Targets (issue 2):
at 64^3 on 2 cores, (b)/(a) <= 1.5 and (c)/(b) >= 3; (d)/(7 b) <= 1.3. Like the ``kindyn`` command, the benchmark sets
a short OpenMP spin (:func:`kindyn.array_kernels.configure_openmp_wait`) unless the environment chooses.

    python scripts/bench_step.py                       # 32^3, 64^3, 128^3; double and single
    python scripts/bench_step.py --sizes 64 --threads 2 --repeats 11 --precision double
"""

from __future__ import annotations

import argparse
import importlib
import json
import os
import resource
import subprocess
import sys
import time
from dataclasses import replace

import numpy as np

from kindyn.array_kernels import configure_openmp_wait

TARGET_SIZE, TARGET_FFT_RATIO, TARGET_PLAIN_RATIO = 64, 1.5, 3.0
RM = 12.0


def parse_args(argv=None):
    p = argparse.ArgumentParser(description=__doc__,
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--sizes", type=int, nargs="+", default=[32, 64, 128], help="grid sizes n (n^3 grids)")
    p.add_argument("--threads", type=int, default=os.cpu_count() or 1, help="FFTW threads (default: cores)")
    p.add_argument("--repeats", type=int, default=7, help="timed repeats per measurement (median)")
    p.add_argument("--warmup", type=int, default=2, help="untimed repeats first")
    p.add_argument("--precision", choices=["double", "single", "both"], default="both")
    p.add_argument("--planning", choices=["estimate", "measure", "patient"], default="measure",
                   help="FFTW planning effort (kindyn's default: measure)")
    p.add_argument("--array-kernels", choices=["auto", "numba", "numpy"], default="auto",
                   help="array kernels of (b) (kindyn's default: auto)")
    p.add_argument("--json", action="store_true", help="also print all results as one JSON object")
    p.add_argument("--worker", choices=["time", "memory-kindyn", "memory-plain"], help=argparse.SUPPRESS)
    p.add_argument("--size", type=int, help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if min(args.sizes) < 8 or args.threads < 1 or args.repeats < 1 or args.warmup < 0:
        p.error("need sizes >= 8, threads >= 1, repeats >= 1, warmup >= 0")
    return args


# --- the pieces being timed -------------------------------------------------------------------

def random_band_field(box, complex_dtype, seed: int = 3) -> np.ndarray:
    """A seeded real, solenoidal, zero-mean field on the 2/3-rule band (half-grid coefficients).

    Built on the band values only (few temporaries, so that it does not set the memory peak);
    amplitudes fall off like ``1/(1 + k^2)``; the kz = 0 plane is made Hermitian so that the field
    is real and every transform reads it alike.
    """
    rng = np.random.default_rng(seed)
    mask = np.broadcast_to(box.dealias_mask, box.spectral_shape)
    k = [np.broadcast_to(kc, box.spectral_shape)[mask] for kc in box.wavenumbers]
    k2 = k[0] ** 2 + k[1] ** 2 + k[2] ** 2
    k2[k2 == 0] = np.inf
    v = (rng.standard_normal((3, k2.size)) + 1j * rng.standard_normal((3, k2.size))) / (1.0 + k2)
    k_dot_v = (k[0] * v[0] + k[1] * v[1] + k[2] * v[2]) / k2
    for i in range(3):
        v[i] -= k[i] * k_dot_v
    b = np.zeros((3, *box.spectral_shape), complex_dtype)
    b[:, mask] = v
    nx, ny = box.grid[:2]
    plane = b[:, :, :, 0]
    mirrored = plane[:, (-np.arange(nx)) % nx][:, :, (-np.arange(ny)) % ny]
    b[:, :, :, 0] = 0.5 * (plane + mirrored.conj())
    b[:, 0, 0, 0] = 0
    return b


class PlainStep:
    """The induction step written plainly with numpy.fft (the reference for (c)).

    ``dB/dt = curl(u x B) + eta Lap B`` with Fourier coefficients ``f = sum f_hat exp(i k.x)``
    (``norm="forward"``), 2/3-rule mask on the curl, Lawson RK4 with ``E(s) = exp(-eta k^2 s)``::

        k1 = N(b);  k2 = N(E(h/2)(b + h/2 k1));  k3 = N(E(h/2) b + h/2 k2);  k4 = N(E(h) b + h E(h/2) k3)
        b <- E(h) b + h/6 (E(h) k1 + 2 E(h/2)(k2 + k3) + k4)

    Constant arrays (wavenumbers, mask, velocity, exponentials for a given h) are made once;
    everything else allocates as plain code does.
    """

    def __init__(self, box, u: np.ndarray, eta: float, real_dtype):
        self.shape = box.shape
        self.u = u.astype(real_dtype)
        self.kx, self.ky, self.kz = (k.astype(real_dtype) for k in box.wavenumbers)
        self.mask = box.dealias_mask.astype(real_dtype)
        self.rates = (eta * box.k_squared).astype(real_dtype)
        self._h = None

    def rhs(self, b_hat):
        b = np.fft.irfftn(b_hat, s=self.shape, axes=(1, 2, 3), norm="forward")
        e_hat = np.fft.rfftn(np.cross(self.u, b, axis=0), axes=(1, 2, 3), norm="forward")
        kx, ky, kz = self.kx, self.ky, self.kz
        curl = 1j * np.stack([ky * e_hat[2] - kz * e_hat[1],
                              kz * e_hat[0] - kx * e_hat[2],
                              kx * e_hat[1] - ky * e_hat[0]])
        return curl * self.mask

    def step(self, b_hat, h):
        if h != self._h:
            self.half, self.full, self._h = np.exp(-self.rates * (h / 2)), np.exp(-self.rates * h), h
        half, full = self.half, self.full
        k1 = self.rhs(b_hat)
        k2 = self.rhs(half * (b_hat + h / 2 * k1))
        k3 = self.rhs(half * b_hat + h / 2 * k2)
        k4 = self.rhs(full * b_hat + h * half * k3)
        return full * b_hat + h / 6 * (full * k1 + 2 * half * (k2 + k3) + k4)


def setup(size: int, precision: str, threads: int, planning: str, array_kernels: str = "auto"):
    """Box, flow, eta and time step of the benchmark problem (ABC 1:1:1, k = 1, Rm = 12, CFL 1)."""
    from kindyn.box import Box
    from kindyn.flows.beltrami import ABCFlow
    from kindyn.layout import BoxLayout
    from kindyn.timestep import cfl_time_step
    from kindyn.transforms import PRECISIONS, TransformSettings

    box, flow = Box(grid=(size, size, size)), ABCFlow(1.0, 1.0, 1.0, 1.0)
    eta = flow.speed / (RM * flow.wavenumber)
    settings = TransformSettings("fftw", threads, planning, precision, array_kernels)
    return box, flow, eta, cfl_time_step(flow, BoxLayout(box), 1.0), settings, PRECISIONS[precision]


def test_field_steppers(box, flow, eta, settings):
    """The full test problems of one wavenumber (3 uniform + 4 sinusoidal along z at K = 1): two
    stacked solvers on one double-precision layout, and their states."""
    from kindyn.array_kernels import choose_threads, make_kernels
    from kindyn.layout import BoxLayout
    from kindyn.testfield.fields import sinusoidal_test_fields, uniform_test_fields
    from kindyn.testfield.problems import TestProblems

    layout = BoxLayout(box, replace(settings, precision="double"))
    kernels = make_kernels(settings.array_kernels, settings.threads, layout.real_dtype)
    groups = [TestProblems(layout, flow, eta, uniform_test_fields(), None, kernels=kernels),
              TestProblems(layout, flow, eta, sinusoidal_test_fields(2, 1, 1.0), 2, kernels=kernels)]
    choose_threads(kernels, groups[1].operator.timing_probe())
    rng = np.random.default_rng(5)
    states = [(rng.standard_normal(g.shape) + 1j * rng.standard_normal(g.shape)) * layout.dealias_mask * 1e-3
              for g in groups]
    return groups, states


def peak_rss_bytes() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # kilobytes on Linux


# --- workers (one subprocess each) -----------------------------------------------------------

def time_worker(args) -> dict:
    from kindyn.assemble import build_solver
    from kindyn.flows.base import sample_velocity

    box, flow, eta, h, settings, (real_dtype, complex_dtype) = setup(args.size, args.precision, args.threads,
                                                                     args.planning, args.array_kernels)
    solver = build_solver(box, flow, eta, settings)
    groups, tf_states = test_field_steppers(box, flow, eta, settings)
    test_problems = sum(g.count for g in groups)
    engine, stepper = solver.engine, solver.stepper
    numpy_stepper = build_solver(box, flow, eta, replace(settings, array_kernels="numpy")).stepper
    plain = PlainStep(box, sample_velocity(flow, box, 0.0), eta, real_dtype)
    b0 = random_band_field(box, complex_dtype)

    # (b) and (c) compute the same thing: one step from the same field
    b_kindyn = b0.copy()
    stepper.step(0.0, b_kindyn, h)
    b_plain = plain.step(b0.copy(), h)
    difference = float(np.max(np.abs(b_kindyn - b_plain)) / np.max(np.abs(b_kindyn)))

    unnormalised = getattr(engine, "unnormalised_forward", False)

    def ffts():  # the transforms of one RK4 step, exactly as the induction operator calls them
        for _ in range(4):
            engine.backward()
            if unnormalised:
                engine.forward(normalise=False)
            else:
                engine.forward()

    state = {"kindyn": b0.copy(), "numpy": b0.copy(), "plain": b0.copy()}

    def kindyn_step():
        stepper.step(0.0, state["kindyn"], h)

    def numpy_kernels_step():
        numpy_stepper.step(0.0, state["numpy"], h)

    def plain_step():
        state["plain"] = plain.step(state["plain"], h)

    def test_field_step():
        for group, y in zip(groups, tf_states):
            group.stepper.step(0.0, y, h)

    engine.spectral[...] = b0
    jobs = {"a": ffts, "b": kindyn_step, "b_numpy": numpy_kernels_step, "c": plain_step, "d": test_field_step}
    wall, cpu = {key: [] for key in jobs}, {key: [] for key in jobs}
    for r in range(args.warmup + args.repeats):
        for key, job in jobs.items():
            start_wall, start_cpu = time.perf_counter(), time.process_time()
            job()
            if r >= args.warmup:
                wall[key].append(time.perf_counter() - start_wall)
                cpu[key].append(time.process_time() - start_cpu)
    w = {key: float(np.median(v)) for key, v in wall.items()}
    best = {key: float(np.min(v)) for key, v in wall.items()}
    c = {key: float(np.median(v)) for key, v in cpu.items()}
    return {"size": args.size, "precision": args.precision, "threads": args.threads, "dt": h,
            "kernels": stepper.kernels.name, "kernel_threads": stepper.kernels.threads,
            "a": w["a"], "b": w["b"], "b_numpy": w["b_numpy"], "c": w["c"], "b_numpy_over_a": w["b_numpy"] / w["a"],
            "d": w["d"], "test_problems": test_problems, "d_per_problem_over_b": w["d"] / (test_problems * w["b"]),
            "b_over_a": w["b"] / w["a"], "c_over_b": w["c"] / w["b"],
            "best_b_over_a": best["b"] / best["a"], "best_c_over_b": best["c"] / best["b"],
            "cpu_b_over_a": c["b"] / c["a"], "cpu_c_over_b": c["c"] / c["b"], "difference": difference,
            "load": os.getloadavg()[0]}


def memory_worker(args) -> dict:
    # import everything first, so that "above" counts the field and the solver only
    for module in ("kindyn.box", "kindyn.flows.beltrami", "kindyn.timestep", "kindyn.transforms.fftw"):
        importlib.import_module(module)
    from kindyn.array_kernels import numba_available  # imports numba when installed

    numba_available()
    from kindyn.assemble import build_solver
    from kindyn.flows.base import sample_velocity

    before = peak_rss_bytes()
    box, flow, eta, h, settings, (real_dtype, complex_dtype) = setup(args.size, args.precision, args.threads,
                                                                     args.planning, args.array_kernels)
    b = random_band_field(box, complex_dtype)
    if args.worker == "memory-kindyn":
        stepper = build_solver(box, flow, eta, settings).stepper
        for _ in range(2):
            stepper.step(0.0, b, h)
    else:
        plain = PlainStep(box, sample_velocity(flow, box, 0.0), eta, real_dtype)
        for _ in range(2):
            b = plain.step(b, h)
    peak = peak_rss_bytes()
    return {"peak": peak / box.points, "above": (peak - before) / box.points}


# --- driver -----------------------------------------------------------------------------------

def run_worker(args, kind: str, size: int, precision: str) -> dict:
    command = [sys.executable, os.path.abspath(__file__), "--worker", kind, "--size", str(size),
               "--precision", precision, "--threads", str(args.threads), "--repeats", str(args.repeats),
               "--warmup", str(args.warmup), "--planning", args.planning, "--array-kernels", args.array_kernels]
    done = subprocess.run(command, capture_output=True, text=True)
    if done.returncode != 0:
        raise SystemExit(f"bench_step: worker {kind} at {size}^3 ({precision}) failed:\n{done.stderr.strip()}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def table(rows) -> str:
    head = (f"{'grid':>6} {'precision':>9} {'(a) FFTs':>9} {'(b) step':>9} {'(c) numpy':>9} {'(b)/(a)':>8} "
            f"{'(c)/(b)':>8} {'(b)/(a)':>8} {'(c)/(b)':>8} {'(b`)/(a)':>8} {'|b-c|/|b|':>9} {'kernels':>9} "
            f"{'kindyn B/pt':>13} {'plain B/pt':>13}")
    units = (f"{'':>6} {'':>9} {'ms':>9} {'ms':>9} {'ms':>9} {'median':>8} {'median':>8} {'best':>8} {'best':>8} "
             f"{'median':>8} {'median':>8} {'':>9} {'(threads)':>9} {'peak (above)':>13} {'peak (above)':>13}")
    lines = [head, units]
    for r in rows:
        lines.append(f"{r['size']:>4}^3 {r['precision']:>9} "
                     f"{1e3 * r['a']:9.2f} {1e3 * r['b']:9.2f} {1e3 * r['c']:9.2f} {r['b_over_a']:8.2f} "
                     f"{r['c_over_b']:8.2f} {r['best_b_over_a']:8.2f} {r['best_c_over_b']:8.2f} "
                     f"{r['b_numpy_over_a']:8.2f} {r['d_per_problem_over_b']:8.2f} {r['difference']:9.1e} {r['kernels']:>6} ({r['kernel_threads']}) {r['kindyn_peak']:6.0f} ({r['kindyn_above']:4.0f}) "
                     f"{r['plain_peak']:6.0f} ({r['plain_above']:4.0f})")
    return "\n".join(lines)


def verdict(rows, threads: int) -> str:
    hits = [r for r in rows if r["size"] == TARGET_SIZE and r["precision"] == "double"]
    if not hits:
        return f"verdict: no {TARGET_SIZE}^3 double-precision measurement; targets not checked"
    r = hits[0]
    fft_ok, plain_ok = r["b_over_a"] <= TARGET_FFT_RATIO, r["c_over_b"] >= TARGET_PLAIN_RATIO
    state = "targets met" if fft_ok and plain_ok else "targets NOT met"
    return (f"verdict ({TARGET_SIZE}^3, double, {threads} thread(s), wall clock): (b)/(a) = {r['b_over_a']:.2f} "
            f"(target <= {TARGET_FFT_RATIO}: {'ok' if fft_ok else 'missed'}), (c)/(b) = {r['c_over_b']:.2f} "
            f"(target >= {TARGET_PLAIN_RATIO:g}: {'ok' if plain_ok else 'missed'}): {state} "
            f"[best repeats: {r['best_b_over_a']:.2f}, {r['best_c_over_b']:.2f}]")


def main(argv=None) -> int:
    args = parse_args(argv)
    configure_openmp_wait()  # as the kindyn command does; workers inherit it
    if args.worker:
        worker = time_worker if args.worker == "time" else memory_worker
        print(json.dumps(worker(args)))
        return 0
    precisions = ["double", "single"] if args.precision == "both" else [args.precision]
    print(f"kindyn step benchmark: ABC flow A = B = C = 1, k = 1, Rm = {RM:g}, classical RK4, CFL 1; "
          f"fftw engine, {args.threads} thread(s), planning {args.planning}; medians of {args.repeats} repeats "
          f"after {args.warmup} warm-up; {os.cpu_count()} cores, load {os.getloadavg()[0]:.1f}; OpenMP wait: "
          f"{', '.join(f'{k}={os.environ[k]}' for k in ('OMP_WAIT_POLICY', 'GOMP_SPINCOUNT') if k in os.environ)}",
          flush=True)
    rows = []
    for precision in precisions:
        for size in args.sizes:
            row = run_worker(args, "time", size, precision)
            for kind in ("kindyn", "plain"):
                memory = run_worker(args, f"memory-{kind}", size, precision)
                row[f"{kind}_peak"], row[f"{kind}_above"] = memory["peak"], memory["above"]
            rows.append(row)
            print(f"  done {size}^3 {precision}", file=sys.stderr, flush=True)
    print(table(rows))
    print(f"times: medians of wall-clock time; ratios of the medians and of the best (shortest) repeats. FFTW "
          f"uses {args.threads} thread(s); kindyn's array kernels in (b) as the solver chose them (threads: "
          f"the faster of 1 and {args.threads}, measured); (b') the same step with the numpy kernels (one thread); "
          f"numpy.fft in (c) runs on one.")
    print("memory: peak = ru_maxrss of a fresh process per grid point (bytes); above = minus the same process "
          "after imports, before the field and solver exist")
    load = os.getloadavg()[0]
    if load > (os.cpu_count() or 1) + 0.5:
        print(f"caution: load average {load:.1f} on {os.cpu_count()} cores: other processes compete, and "
              "wall-clock times with several threads are unreliable; compare the cpu ratios or use --threads 1")
    print(verdict(rows, args.threads))
    if args.json:
        print(json.dumps({"rows": rows, "threads": args.threads, "repeats": args.repeats}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
