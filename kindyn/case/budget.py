"""What a case will cost, checked before anything is allocated: memory, cores, problem sizes.

:func:`check_budget` is called by the loader (:func:`kindyn.case.load.build_case`) after the case
is validated and *before* the box or the flow is built, so that a case beyond this machine is
refused with one :class:`~kindyn.errors.CaseError` line that gives the estimate, e.g.::

    case.toml: domain.grid = [2048, 2048, 2048]: expected a case that fits in memory: it needs
    about 1.9 TiB (grid 2048 x 2048 x 2048, 3-D run); this machine has 23 GiB

The estimate depends on what the case is used for (its *purpose*): ``"run"`` (a growth run, the
default, also ``kindyn ensemble``), ``"flow"`` (``kindyn flow``), ``"modes"`` (``kindyn modes``),
``"testfield"`` or ``"sweep"`` (each point as its ``[sweep] method`` solves it). The command line
sets it for the command it runs (:func:`purpose`); library callers get ``"run"``.

The model (bytes; ``s`` is 8 in double precision, 4 in single; ``N`` grid points)::

    every process          BASE_BYTES                       interpreter, numpy, scipy, pyfftw, numba
    run                    RUN_REALS_PER_POINT * s * N      fields, RK stages, FFT buffers, velocity
    flow                   FLOW_REALS_PER_POINT * 8 * N     velocity, vorticity, spectra, statistics
    modes, box             run + (basis + 2 fields) vectors   basis: max(count + 3, min(krylov, 512 MiB))
    modes, planar          per k_z plane like a run on nx x ny, plus a complex Krylov basis
    testfield              run + TESTFIELD_BYTES_PER_POINT * N (steady solves, averages) + 2 stacked
                           solvers (full, SOCA) of 3 n_tests components, TESTFIELD_REALS_PER_COMPONENT
                           * 8 * N bytes per component

The constants were measured (peak resident memory, ``ru_maxrss``, of ``kindyn`` processes, 2 cores,
numba installed: runs 64^3 .. 128^3 240 B per point, ``kindyn flow`` 170 B per point, test fields
24^3 .. 32^3 3.5 kB per point, box eigen-solves 24^3 .. 40^3 within the model) and rounded up; the
estimate is meant to be right within a factor of about 1.5 (it errs high), which is all a refusal
needs. Total memory is read from ``/proc/meminfo``
(``MemTotal``, or a cgroup limit when lower), else ``os.sysconf``; when it cannot be read, only
sizes that could never fit are refused (:data:`ABSOLUTE_LIMIT_BYTES`).

A velocity file (``flow.type = "velocity-file"``) is read whole: before it is read, the sizes its
header declares (:func:`kindyn.flows.velocity_file.declared_shape`) are checked too
(:func:`check_velocity_file`): ``FILE_READ_COPIES`` copies of its three components in double
precision while it is read (the variables and their stack), one snapshot's transform, and its
snapshots kept on the case's grid, on top of the estimate above.

Other sizes checked here: ``numerics.threads`` at most the cores this process may use (except
where the case runs elsewhere: :func:`purpose` with ``local=False``), and for eigen-solves
``modes.count`` below the number of unknowns of the grid.
"""

from __future__ import annotations

import contextlib
import contextvars
import math
import os
from dataclasses import dataclass

from kindyn.errors import CaseError

GIB = 2**30
BASE_BYTES = 256 * 2**20  # measured 96 MiB (numpy, scipy) to 230 MiB (with numba and pyfftw plans)
RUN_REALS_PER_POINT = 32  # measured about 30 (240 B per point at 64^3 .. 128^3, double precision)
FLOW_REALS_PER_POINT = 24  # measured about 21 (170 B per point)
TESTFIELD_BYTES_PER_POINT = 4096  # measured 3.5 kB per point (24^3 .. 32^3, direct solves: GMRES basis)
TESTFIELD_REALS_PER_COMPONENT = 4  # per point and stacked component (states and stages on the band)
PLANAR_REALS_PER_POINT = 64  # per point of the nx x ny plane (complex fields, 2-D transforms)
BASIS_BYTES_CAP = 512 * 2**20  # the Arnoldi basis cap of kindyn.eigen.krylov
DEFAULT_BASIS = 120  # kindyn.eigen.krylov.DEFAULT_MAX_BASIS
FILE_READ_COPIES = 2  # a velocity file's values while it is read: the variables, then their stack
ABSOLUTE_LIMIT_BYTES = 2**50  # 1 PiB: refused even where the machine's memory is unknown

PURPOSES = ("run", "flow", "modes", "testfield", "sweep")

_PURPOSE: contextvars.ContextVar = contextvars.ContextVar("kindyn_case_purpose", default=("run", True))


@contextlib.contextmanager
def purpose(name: str, local: bool = True):
    """Within the block, cases are checked for ``name`` (one of :data:`PURPOSES`); ``local=False``
    when the case is computed on other machines (a Dask cluster): then only sizes are checked here,
    and each worker checks its own memory and cores when it loads the point."""
    if name not in PURPOSES:
        raise ValueError(f"unknown purpose {name!r}; expected one of {PURPOSES}")
    token = _PURPOSE.set((name, bool(local)))
    try:
        yield
    finally:
        _PURPOSE.reset(token)


def current_purpose() -> tuple[str, bool]:
    """``(purpose, local)`` set by :func:`purpose` (default ``("run", True)``)."""
    return _PURPOSE.get()


# ---------------------------------------------------------------------------------- the machine

def machine_memory() -> int | None:
    """Bytes of memory this process can use: ``MemTotal`` (or a lower cgroup limit); None if unknown."""
    total = None
    try:
        with open("/proc/meminfo", encoding="ascii") as stream:
            for line in stream:
                if line.startswith("MemTotal:"):
                    total = int(line.split()[1]) * 1024
                    break
    except (OSError, ValueError, IndexError):
        total = None
    if total is None:
        try:
            total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
        except (AttributeError, ValueError, OSError):
            total = None
    limit = _cgroup_limit()
    if limit is not None and (total is None or limit < total):
        total = limit
    return total if total and total > 0 else None


def _cgroup_limit() -> int | None:
    for path in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            with open(path, encoding="ascii") as stream:
                text = stream.read().strip()
        except OSError:
            continue
        if text.isdigit() and int(text) < 2**60:
            return int(text)
    return None


def usable_cores() -> int:
    """Cores this process may run on (its CPU affinity), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # pragma: no cover (not Linux)
        return max(1, os.cpu_count() or 1)


def size_text(nbytes: float, down: bool = False) -> str:
    """``48 GiB``, ``1.9 TiB``, ``350 MiB`` (binary units); rounded up, or down with ``down``
    (what a machine has is never overstated, what a case needs never understated)."""
    units = ("B", "KiB", "MiB", "GiB", "TiB", "PiB", "EiB")
    value, unit = float(nbytes), 0
    while value >= 1024 and unit < len(units) - 1:
        value /= 1024
        unit += 1
    if value >= 1e6:
        return f"{value:.3g} {units[unit]}"
    step = 0.1 if value < 10 else 1.0
    value = (math.floor if down else math.ceil)(value / step - 1e-9 * (-1 if down else 1)) * step
    return f"{value:.1f} {units[unit]}" if step < 1 else f"{value:.0f} {units[unit]}"


# ---------------------------------------------------------------------------------- the estimate

@dataclass(frozen=True)
class Estimate:
    """Bytes a case needs, the key that sets it (for the message) and what was counted."""

    nbytes: int
    key: str
    value: object
    what: str


def kept_modes(n: int) -> int:
    """Largest mode number the 2/3 rule keeps on an ``n``-point axis (as :func:`kindyn.box.max_kept_mode`)."""
    return (n - 1) // 3


def box_unknowns(grid) -> int:
    """Real unknowns of the solenoidal, zero-mean, dealiased field on ``grid`` (the size of the
    box eigen-solver's vectors, :class:`kindyn.eigen.basis.SolenoidalBasis`)."""
    nx, ny, nz = grid
    kx, ky, mz = 2 * kept_modes(nx) + 1, 2 * kept_modes(ny) + 1, kept_modes(nz)
    return 4 * (kx * ky * mz + (kx * ky - 1) // 2)


def plane_unknowns(plane) -> int:
    """Complex unknowns of one k_z plane on the ``nx x ny`` grid (:class:`kindyn.eigen.basis.KzPlaneBasis`)."""
    nx, ny = plane
    return 2 * (2 * kept_modes(nx) + 1) * (2 * kept_modes(ny) + 1)


def _points(grid) -> int:
    return math.prod(int(n) for n in grid)


def _grid_text(grid) -> str:
    return " x ".join(str(n) for n in grid)


def planar_solve(config, flow=None) -> bool | None:
    """Whether the eigen-solver takes the planar reduction: ``modes.method``, and for ``"auto"`` the
    flow's ``z_independent`` (None before the flow is built: either may happen)."""
    method = config.modes.method
    if method != "auto":
        return method == "planar"
    return None if flow is None else bool(getattr(flow, "z_independent", False))


def estimate(config, purpose_name: str = "run", flow=None) -> Estimate:
    """The memory estimate of ``config`` (a :class:`~kindyn.case.config.CaseConfig`) for a purpose
    (before the flow is built, ``flow=None``, the smaller of the possible eigen-solves counts)."""
    if purpose_name == "sweep":
        purpose_name = "modes" if config.sweep and config.sweep.method == "modes" else "run"
    grid = tuple(int(n) for n in config.domain.grid)
    points = _points(grid)
    real = 4 if config.numerics.precision == "single" else 8
    run = RUN_REALS_PER_POINT * real * points
    where = ("domain.grid", list(grid))
    if purpose_name == "flow":
        return Estimate(BASE_BYTES + FLOW_REALS_PER_POINT * 8 * points, *where,
                        f"grid {_grid_text(grid)}, flow statistics")
    if purpose_name == "testfield":
        s = config.testfield
        count = len(s.modes or s.wavenumbers or (1,))
        tests = 4 * count + (3 if s.uniform else 0)  # sinusoidal (cos, sin x two directions) and uniform
        stacked = 2 * 3 * tests * TESTFIELD_REALS_PER_COMPONENT * 8 * points + TESTFIELD_BYTES_PER_POINT * points
        key = ("testfield.modes", list(s.modes)) if s.modes else \
            ("testfield.wavenumbers", list(s.wavenumbers)) if s.wavenumbers else where
        if stacked < run:
            key = where
        return Estimate(BASE_BYTES + run + stacked, *key,
                        f"grid {_grid_text(grid)}, {2 * tests} stacked test problems")
    if purpose_name == "modes":
        planar = planar_solve(config, flow)
        if planar is None:
            return min((_modes_estimate(config, grid, points, real, run, p) for p in (True, False)),
                       key=lambda e: e.nbytes)
        return _modes_estimate(config, grid, points, real, run, planar)
    return Estimate(BASE_BYTES + run, *where, f"grid {_grid_text(grid)}, 3-D run")


def _modes_estimate(config, grid, points, real, run, planar: bool) -> Estimate:
    m = config.modes
    fields = min(m.count, DEFAULT_BASIS) if m.fields is None else m.fields
    if planar:
        plane = tuple(m.planar_grid or grid[:2])
        n = plane_unknowns(plane)
        basis = _basis_vectors(m, n, 16) * n * 16
        plane_bytes = PLANAR_REALS_PER_POINT * 8 * _points(plane)
        key = ("modes.planar_grid", list(plane)) if m.planar_grid else ("domain.grid", list(grid))
        if basis > plane_bytes and (m.count > DEFAULT_BASIS or (m.krylov_dimension or 0) > DEFAULT_BASIS):
            key = ("modes.count", m.count) if m.count >= (m.krylov_dimension or 0) else \
                ("modes.krylov_dimension", m.krylov_dimension)
        flow_on_grid = 2 * 3 * 8 * points  # the flow sampled (and checked) on the 3-D grid
        return Estimate(BASE_BYTES + flow_on_grid + plane_bytes + basis + fields * 6 * 8 * _points(plane), *key,
                        f"planar grid {_grid_text(plane)}, a Krylov basis of {_basis_vectors(m, n, 16)} vectors")
    n = box_unknowns(grid)
    vectors = _basis_vectors(m, n, 8)
    basis = vectors * n * 8 + m.count * n * 16
    out = fields * 6 * 8 * points  # real and imaginary eigenfields on the grid
    key = ("domain.grid", list(grid))
    if basis > run and (m.count > DEFAULT_BASIS or (m.krylov_dimension or 0) > DEFAULT_BASIS):
        key = ("modes.count", m.count) if m.count >= (m.krylov_dimension or 0) else \
            ("modes.krylov_dimension", m.krylov_dimension)
    return Estimate(BASE_BYTES + run + basis + out, *key,
                    f"grid {_grid_text(grid)}, a Krylov basis of {vectors} vectors")


def _basis_vectors(m, n: int, itemsize: int) -> int:
    """Vectors of the Krylov basis (as :func:`kindyn.eigen.krylov.leading_eigenpairs` sizes it)."""
    want = m.count + 1
    if m.solver == "arpack":
        return min(n, m.krylov_dimension or max(2 * want + 1, 40))
    capped = min(m.krylov_dimension or DEFAULT_BASIS, BASIS_BYTES_CAP // max(1, n * itemsize))
    return min(n, max(want + 2, capped))


# ---------------------------------------------------------------------------------- the checks

def check_budget(config, flow=None) -> None:
    """Refuse ``config`` when it cannot run here (memory, cores) or its sizes make no sense
    (eigenvalue count against the unknowns), for the current :func:`purpose`; called before the
    flow is built and again with it (``flow``: then the eigen-solve's reduction is known)."""
    name, local = current_purpose()
    file = config.path
    check_sizes(config, name, flow)
    if local and flow is None:
        check_threads(config)
    found = estimate(config, name, flow)
    limit, have = _limit(local)
    if found.nbytes > limit:
        raise CaseError(file, found.key, found.value,
                        f"a case that fits in memory: it needs about {size_text(found.nbytes)} "
                        f"({found.what}); {have}")
    if flow is None:
        check_velocity_file(config, found.nbytes, limit, have)


def _limit(local: bool) -> tuple[int, str]:
    """Bytes a case may need here, and the words for it."""
    available = machine_memory() if local else None
    if available is not None:
        return available, f"this machine has {size_text(available, down=True)}"
    return ABSOLUTE_LIMIT_BYTES, f"the limit is {size_text(ABSOLUTE_LIMIT_BYTES)}"


def velocity_file_bytes(shape, grid) -> int:
    """Bytes of reading a velocity file whose variables have ``shape`` ((S,) nx', ny', nz') for a case
    on ``grid`` (module docstring)."""
    snapshots = math.prod(shape[:-3]) if len(shape) > 3 else 1
    points = math.prod(shape[-3:]) if len(shape) >= 3 else math.prod(shape)
    read = 3 * 8 * points * (FILE_READ_COPIES * snapshots + 1)
    kept = 3 * 8 * snapshots * _points(grid)  # complex coefficients on the half grid
    return read + kept


def check_velocity_file(config, needed: int = 0, limit: int | None = None, have: str = "") -> None:
    """Refuse a velocity file whose declared sizes do not fit beside the case's ``needed`` bytes,
    from its header alone (before any of its data is read)."""
    if config.flow_type != "velocity-file":
        return
    from pathlib import Path

    from kindyn.flows.velocity_file import declared_shape

    found = declared_shape(config.flow_params, str(Path(config.path).parent))
    if found is None:
        return  # the reader says what is wrong with the file
    if limit is None:
        limit, have = _limit(current_purpose()[1])
    path, variable, dims, shape = found
    nbytes = needed + velocity_file_bytes(shape, config.domain.grid)
    if nbytes > limit:
        sizes = f"{variable}({', '.join(dims)}) of {_grid_text(shape)}"
        raise CaseError(config.path, "flow.file", config.flow_params.get("file"),
                        f"a velocity file that fits in memory: {path.name} declares {sizes} points, and "
                        f"reading it needs about {size_text(nbytes)}; {have}")


def check_threads(config) -> None:
    threads, cores = config.numerics.threads, usable_cores()
    if threads > cores:
        raise CaseError(config.path, "numerics.threads", threads,
                        f"at most the {cores} core{'s' if cores != 1 else ''} this process may use "
                        "(more threads only slow the run down)")


def check_sizes(config, name: str, flow=None) -> None:
    """Problem sizes that no machine changes: the eigenvalue count against the unknowns."""
    if name == "sweep":
        name = "modes" if config.sweep and config.sweep.method == "modes" else "run"
    if name != "modes":
        return
    m = config.modes
    grid = tuple(config.domain.grid)
    planar = planar_solve(config, flow)
    if planar is None:
        return  # known once the flow is built
    n = plane_unknowns(m.planar_grid or grid[:2]) if planar else box_unknowns(grid)
    key, value = ("modes.planar_grid", list(m.planar_grid)) if planar and m.planar_grid else ("domain.grid", list(grid))
    if n < 4:
        raise CaseError(config.path, key, value,
                        f"a grid whose 2/3-rule band holds a magnetic field ({n} unknowns; at least 4 points "
                        "along an axis keep mode 1)")
    if m.count > n - 3:
        raise CaseError(config.path, "modes.count", m.count,
                        f"at most {n - 3} eigenvalues: the {'plane' if planar else 'grid'} "
                        f"{_grid_text(m.planar_grid or grid[:2] if planar else grid)} has {n} unknowns")
