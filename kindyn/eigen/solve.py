"""From a validated case to its leading eigenmodes (``kindyn modes`` and eigen-based sweeps).

Chooses the problem from the flow and the ``[modes]`` section (:mod:`kindyn.eigen.settings`):

* **box** (any steady or time-periodic flow): real vectors on the 3-D half grid;
* **planar** (``u`` independent of z, declared and checked numerically): ``B = b(x, y) exp(i k_z z)``
  on a 2-D grid, one solve per ``k_z``; eigenvalues at ``-k_z`` are the complex conjugates and are not
  listed. ``method = "auto"`` takes planar whenever it applies.

Steady flows: ARPACK on ``exp(L T)`` with a short ``T`` (:mod:`kindyn.eigen.krylov`);
time-periodic flows: Floquet multipliers of the period map (:mod:`kindyn.eigen.floquet`), frequencies
modulo ``2 pi/T``. Other flows (random renovating, aperiodic) have no eigenmodes and are refused.

Cautions carried into every result: the eigenvalues inherit the time scheme's ``O(dt^4)`` error
(lower ``modes.cfl`` to check), and an under-resolved grid can show spurious growth: flagged, as a
run is, by either of two criteria (``cutoff_ratio`` of the leading eigenfield against
``run.resolution_threshold``, and the diffusive scale ``k_cut sqrt(eta/|grad u|_rms) >= 1``;
``ModesOutcome.resolution_caution`` says which). The time step is checked against the scheme's
stability limit (for rk2 with the step diffusion number, :func:`kindyn.assemble.check_stability`).
"""

from __future__ import annotations

import math
import time as wallclock
from dataclasses import dataclass, field

import numpy as np

from kindyn.eigen.floquet import floquet_modes, steps_per_period
from kindyn.eigen.krylov import EigenSolution, leading_eigenpairs
from kindyn.assemble import check_stability, transform_settings
from kindyn.eigen.z_independent import is_z_independent, kz_plane_cutoff_ratio, kz_plane_time_step
from kindyn.layout import KzPlane, KzPlaneLayout
from kindyn.eigen.propagator import box_propagator, kz_plane_propagator
from kindyn.errors import CaseError
from kindyn.timestep import diffusion_number, max_speed

DEFAULT_PROPAGATION_TURNOVERS = 1.0  # T = 1/(U k_f): principal branch for |omega| < pi U k_f (see krylov)


@dataclass(frozen=True)
class Mode:
    """One eigenvalue ``p = gamma + i omega`` with its residual and (planar) vertical wavenumber."""

    eigenvalue: complex
    residual: float
    multiplier: complex
    branch_shift: int
    kz: float | None  # None for the box method

    @property
    def growth_rate(self) -> float:
        return float(self.eigenvalue.real)

    @property
    def frequency(self) -> float:
        return float(self.eigenvalue.imag)


@dataclass(frozen=True)
class ModesOutcome:
    """Leading modes of a case; ``fields[i] = (real, imag)`` physical eigenfields of ``modes[i]``.

    Box fields have shape ``(3, nx, ny, nz)``; planar fields ``(3, nx, ny)`` hold the amplitude ``b``
    of ``B = Re[b exp(i k_z z + p t)]`` on the plane grid ``planar_grid``.
    """

    method: str
    periodic: bool
    modes: list
    fields: list
    time_step: float
    propagation_time: float
    frequency_modulus: float | None
    applications: int
    wall_seconds: float
    cutoff_ratio: float
    resolution_warning: bool  # either resolution criterion tripped (resolution_flags says which)
    z_independent: bool
    planar_grid: tuple | None = None
    solutions: dict = field(default_factory=dict)  # kz (or None) -> EigenSolution
    resolution_flags: tuple = ()  # "spectrum" (leading eigenfield at the cut-off) and/or "diffusive_scale"
    diffusive_resolution: float = math.nan  # k_cut sqrt(eta/|grad u|_rms) (resolved when >= 1)
    resolution_caution: str = ""  # the sentences for the flagged criteria ("" when none tripped)

    @property
    def leading(self) -> Mode:
        return self.modes[0]


def flow_kind(case) -> str:
    """``"steady"`` or ``"periodic"``; a :class:`CaseError` for flows without eigenmodes."""
    flow = case.flow
    if getattr(flow, "steady", False):
        return "steady"
    period = getattr(flow, "period", None)
    if period and math.isfinite(period) and period > 0:
        return "periodic"
    raise CaseError(case.path, "flow.type", case.flow_type,
                    "a steady or time-periodic flow for eigenmodes (use kindyn run for other flows)")


def choose_method(case, z_independent: bool) -> str:
    method = case.modes.method
    if method == "planar" and not z_independent:
        raise CaseError(case.path, "modes.method", method,
                        "\"box\" or \"auto\": the planar reduction needs a flow that does not depend on z")
    if method == "auto":
        method = "planar" if z_independent else "box"
    if method == "box":  # keys of the planar reduction would be silently unused
        for key in ("kz", "planar_grid"):
            if getattr(case.modes, key) is not None:
                raise CaseError(case.path, f"modes.{key}", list(getattr(case.modes, key)),
                                "no planar setting for a 3-D (box) solve: the flow depends on z or modes.method = "
                                "\"box\" (remove it, or solve a z-independent flow with method \"planar\")")
    return method


def default_wavenumbers(box) -> tuple[float, ...]:
    """The ``k_z = 2 pi m/Lz >= 0`` that the 3-D box keeps after dealiasing."""
    return tuple(2 * math.pi * m / box.lengths[2] for m in range((box.grid[2] - 1) // 3 + 1))


def _steady_steps(settings, dt_max: float, turnover: float) -> tuple[float, int]:
    """``(dt, steps)`` with an even number of steps spanning the propagation time."""
    T = settings.propagation_time or DEFAULT_PROPAGATION_TURNOVERS * turnover
    if settings.time_step:
        steps = max(2, 2 * round(T / (2 * settings.time_step)))
        return settings.time_step, steps
    steps = max(2, 2 * math.ceil(T / (2 * dt_max) - 1e-12))
    return T / steps, steps


def _time_grid(case, kind: str, dt_at_unit_cfl: float, speed: float) -> tuple[float, int]:
    """``(dt, steps)`` of one propagation: whole flow periods for periodic flows, otherwise an even
    number of steps over the propagation time; ``dt_at_unit_cfl`` is the step at ``cfl = 1``,
    ``speed`` the flow's ``max_x |u|`` (the step diffusion number ``eta/(dt U^2)`` that the rk2
    stability limit needs, :func:`kindyn.timestep.diffusion_number`)."""
    settings, flow = case.modes, case.flow
    dt_max = settings.time_step or settings.cfl * dt_at_unit_cfl
    if kind == "periodic":
        steps = steps_per_period(flow.period, dt_max)
        dt = flow.period / steps
    else:
        dt, steps = _steady_steps(settings, dt_max, 1.0 / (flow.speed * flow.wavenumber))
    key, value = ("modes.time_step", settings.time_step) if settings.time_step else ("modes.cfl", settings.cfl)
    rate = 1.0 / dt_at_unit_cfl if dt_at_unit_cfl > 0 and math.isfinite(dt_at_unit_cfl) else None
    check_stability(case.run.scheme, dt / dt_at_unit_cfl, case.path, key, value, rate,
                    damping=diffusion_number(case.eta, dt, speed))
    return dt, steps


def _arpack(settings) -> dict:
    return {"tolerance": settings.tolerance, "krylov_dimension": settings.krylov_dimension,
            "max_restarts": settings.max_restarts, "seed": settings.seed, "solver": settings.solver}


def solve_modes(case, count: int | None = None, progress=None, with_fields: bool = True) -> ModesOutcome:
    """Leading eigenmodes of ``case`` (see module doc); ``progress(text)`` is told of each solve.

    Eigen-solves run in one process: the Krylov vectors live whole in that process, and the planar
    (single-k_z) method is already small. Launched on several MPI processes they refuse before any
    computation; time stepping (``kindyn run``) is the distributed route to the leading growth rate.
    """
    from kindyn.transforms.launch import launched_processes

    processes = launched_processes()
    if processes > 1:
        raise CaseError(case.path, "modes", f"{processes} MPI processes",
                        "one process: eigen-solves are not distributed (run kindyn modes without mpiexec, or use "
                        "kindyn run, which is)")
    settings = case.modes
    count = count or settings.count
    kind = flow_kind(case)
    z_independent = is_z_independent(case.flow, case.box)
    method = choose_method(case, z_independent)
    started = wallclock.time()
    if method == "box":
        outcome = _solve_box(case, count, kind, progress, with_fields)
    else:
        outcome = _solve_planar(case, count, kind, progress, with_fields)
    flags, diffusive, caution = _resolution(case, outcome["cutoff"], outcome.get("planar_grid"))
    return ModesOutcome(method, kind == "periodic", outcome["modes"], outcome["fields"], outcome["dt"],
                        outcome["T"], 2 * math.pi / outcome["T"] if kind == "periodic" else None,
                        outcome["applications"], wallclock.time() - started, outcome["cutoff"],
                        bool(flags), z_independent, outcome.get("planar_grid"),
                        outcome["solutions"], tuple(flags), diffusive, caution)


def _resolution(case, cutoff: float, planar_grid) -> tuple[list, float, str]:
    """Both resolution criteria of a run (:mod:`kindyn.run`) for an eigen-solve: the leading
    eigenfield's spectrum at the cut-off against ``run.resolution_threshold``, and the diffusive scale
    (:mod:`kindyn.diagnostics.resolution`) on the grid that was solved (the planar grid for planar
    solves; z, along which such a flow is uniform, does not count). ``(flags, k_cut l, caution)``."""
    from kindyn.box import Box
    from kindyn.diagnostics.resolution import counted_axes, diffusive_resolution, resolution_flags
    from kindyn.layout import BoxLayout

    box = case.box
    if planar_grid is not None:
        box = Box(box.lengths, (planar_grid[0], planar_grid[1], box.grid[2]))
    layout = BoxLayout(box)
    diffusive = diffusive_resolution(case.flow, layout, case.eta, counted_axes(case.flow, layout))
    threshold = case.run.resolution_threshold
    flags, caution = resolution_flags(cutoff, threshold, diffusive, "leading eigenfield's spectrum", "eigen-solve")
    return flags, diffusive.ratio, caution


def _modes_of(solution: EigenSolution, kz) -> list:
    return [Mode(complex(p), float(r), complex(mu), int(s), kz) for p, r, mu, s in
            zip(solution.eigenvalues, solution.residuals, solution.multipliers, solution.branch_shifts)]


def _solve_box(case, count, kind, progress, with_fields) -> dict:
    from kindyn.diagnostics.spectra import cutoff_ratio
    from kindyn.layout import BoxLayout
    from kindyn.timestep import cfl_time_step

    box, flow, settings = case.box, case.flow, case.modes
    grid_layout = BoxLayout(box)
    dt, steps = _time_grid(case, kind, cfl_time_step(flow, grid_layout, 1.0), max_speed(flow, grid_layout))
    propagator = box_propagator(box, flow, case.eta, dt, steps, transform_settings(case.numerics), case.run.scheme)
    if progress:
        progress(f"box {list(box.grid)}: {propagator.size} unknowns, T = {propagator.time:.4g}, "
                 f"{steps} steps of {dt:.4g}")
    solve = floquet_modes if kind == "periodic" else leading_eigenpairs
    solution = solve(propagator, count, **_arpack(settings))
    modes = _modes_of(solution, None)
    nfields = min(len(modes), count if settings.fields is None else settings.fields) if with_fields else 0
    fields, cutoff = [], 0.0
    layout = propagator.solver.layout
    for j in range(len(modes)):
        if j >= max(nfields, 1):
            break
        re_hat, im_hat = propagator.basis.complex_field_hat(solution.vectors[:, j])
        if j == 0:
            cutoff = cutoff_ratio(np.concatenate([re_hat, im_hat]), layout)
        if j < nfields:
            fields.append((layout.physical_from_spectral(re_hat), layout.physical_from_spectral(im_hat)))
    return {"modes": modes, "fields": fields, "dt": dt, "T": propagator.time, "applications": solution.applications,
            "cutoff": cutoff, "solutions": {None: solution}}


def _solve_planar(case, count, kind, progress, with_fields) -> dict:
    box, flow, settings = case.box, case.flow, case.modes
    plane = settings.planar_grid or box.grid[:2]
    lengths = box.lengths[:2]
    _check_plane(case, plane)
    wavenumbers = settings.kz or default_wavenumbers(box)
    widest = KzPlane(lengths, plane, max(wavenumbers))
    dt, steps = _time_grid(case, kind, kz_plane_time_step(flow, widest, 1.0), max_speed(flow, KzPlaneLayout(widest)))
    solutions, candidates, applications = {}, [], 0
    for kz in wavenumbers:
        grid = KzPlane(lengths, plane, kz)
        propagator = kz_plane_propagator(grid, flow, case.eta, dt, steps, case.run.scheme,
                                       transforms=transform_settings(case.numerics))
        if progress:
            progress(f"planar {list(plane)}, kz = {kz:.6g}: {propagator.size} unknowns, T = {propagator.time:.4g}")
        solve = floquet_modes if kind == "periodic" else leading_eigenpairs
        solution = solve(propagator, count, **_arpack(settings))
        solutions[kz] = solution
        applications += solution.applications
        for j, mode in enumerate(_modes_of(solution, kz)):
            candidates.append((mode, propagator, solution.vectors[:, j]))
    candidates.sort(key=lambda c: (-round(c[0].growth_rate, 12), -c[0].frequency))
    candidates = candidates[:count]
    nfields = min(len(candidates), count if settings.fields is None else settings.fields) if with_fields else 0
    fields, cutoff = [], 0.0
    for j, (mode, propagator, vector) in enumerate(candidates):
        if j >= max(nfields, 1):
            break
        b_hat = propagator.field_hat(vector)
        if j == 0:
            cutoff = kz_plane_cutoff_ratio(b_hat, propagator.solver.layout.plane)
        if j < nfields:
            engine = propagator.solver.engine
            engine.spectral[...] = b_hat
            engine.backward()
            b = engine.real[..., 0].copy()
            fields.append((b.real.copy(), b.imag.copy()))
    return {"modes": [c[0] for c in candidates], "fields": fields, "dt": dt, "T": steps * dt,
            "applications": applications, "cutoff": cutoff, "solutions": solutions, "planar_grid": tuple(plane)}


def _check_plane(case, plane) -> None:
    """The planar grid must keep the flow's modes after dealiasing (as the domain grid must)."""
    from kindyn.box import Box
    from kindyn.errors import ParameterError

    try:
        case.flow.check_box(Box(case.box.lengths, (plane[0], plane[1], case.box.grid[2])))
    except ParameterError as exc:
        raise CaseError(case.path, "modes.planar_grid", list(plane), exc.expected) from None


def point_summary(case, outcome: ModesOutcome) -> dict:
    """The leading mode's numbers as a flat dict (a sweep point solved by eigen-solve).

    Keys: ``growth_rate``, ``frequency`` (None-free floats), ``residual``, ``converged`` (ARPACK
    converged and residual below ``100 * modes.tolerance``), ``kz`` (planar; None for box),
    ``method``, ``periodic``, ``frequency_modulus`` (``2 pi/T`` for Floquet modes, else None),
    ``eigenvalues`` (list of ``[gamma, omega]``), ``residuals``, ``Rm``, ``eta``, ``U``, ``k_f``,
    ``cutoff_ratio``, ``resolution_warning``, ``resolution_flags``, ``diffusive_resolution``,
    ``wall_seconds``, ``propagations``.

    ``growth_rate_error`` is the first-order bound ``residual / T`` on the eigenvalue of the
    propagator mapped back to ``p`` (``|d mu| <= residual |mu|`` and ``dp = d mu/(mu T)``).
    """
    lead = outcome.leading
    flow = case.flow
    return {
        "growth_rate": lead.growth_rate,
        "frequency": lead.frequency,
        "residual": lead.residual,
        "growth_rate_error": float(lead.residual / outcome.propagation_time),
        "stop_reason": "converged" if lead.residual <= 100 * case.modes.tolerance else "residual above tolerance",
        "converged": bool(lead.residual <= 100 * case.modes.tolerance),
        "kz": lead.kz,
        "method": outcome.method,
        "periodic": outcome.periodic,
        "frequency_modulus": outcome.frequency_modulus,
        "eigenvalues": [[m.growth_rate, m.frequency] for m in outcome.modes],
        "residuals": [m.residual for m in outcome.modes],
        "Rm": case.Rm,
        "eta": case.eta,
        "U": flow.speed,
        "k_f": flow.wavenumber,
        "cutoff_ratio": outcome.cutoff_ratio,
        "resolution_warning": bool(outcome.resolution_warning),
        "resolution_flags": list(outcome.resolution_flags),
        "diffusive_resolution": outcome.diffusive_resolution if math.isfinite(outcome.diffusive_resolution) else None,
        "wall_seconds": outcome.wall_seconds,
        "propagations": outcome.applications,
    }
