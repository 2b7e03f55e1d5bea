"""``kindyn modes CASE.toml``: leading eigenvalues and eigenfields by a Krylov eigen-solve.

Prints the leading eigenvalues ``p = gamma + i omega`` with their residual norms (a table), the
leading one with its error bound and whether it converged, and the cautions on stdout (progress on
stderr; ``--json``: one object, cautions also on stderr); writes the
eigenfields (physical space, real and imaginary parts) to ``OUT/NAME-modes.nc`` and a figure of the
leading mode's ``|B|`` on slices to ``OUT/NAME-modes.png``. ``--json`` prints one object with at
least ``eigenvalues`` (list of ``[gamma, omega]``), ``residuals``, ``growth_rate``,
``growth_rate_error`` (the bound ``residual / T``), ``frequency``, ``converged`` and ``cautions``.

Progress (stderr, off with ``--quiet``): one line per eigen-solve (one for the box, one per k_z
for the planar reduction) with the elapsed time and, from the second solve on, an ETA at the
mean time per solve (:class:`kindyn.commands.progress.CountEta`); a single box solve has no ETA
(the Krylov iteration stops when it converges).
"""

from __future__ import annotations

import math

import numpy as np

from kindyn.commands.common import (Reporter, add_case_arguments, add_figure_arguments, add_quiet_argument,
                                    case_from_args, number_text, output_folder, results_kept,
                                    with_error)
from kindyn.commands.progress import CountEta, Progress
from kindyn.eigen.solve import point_summary, solve_modes
from kindyn.errors import CaseError
from kindyn.diagnostics.spectra import resolution_caution

HELP = "leading eigenvalues and eigenmodes (Krylov solve; Floquet for periodic flows; planar reduction)"

TIME_STEP_CAUTION = ("eigenvalues carry the time scheme's O(dt^4) error (dt = {dt:.3g}); repeat with a smaller "
                     "modes.cfl to check the digits you need")


def add_arguments(parser) -> None:
    add_case_arguments(parser)
    parser.add_argument("--count", type=int, default=None, metavar="N",
                        help="number of leading eigenvalues (overrides modes.count)")
    add_quiet_argument(parser)
    add_figure_arguments(parser)


def solve_count(case) -> int:
    """How many eigen-solves ``case`` makes: one per k_z of the planar reduction, else one."""
    from kindyn.eigen.solve import choose_method, default_wavenumbers
    from kindyn.eigen.z_independent import is_z_independent

    if choose_method(case, is_z_independent(case.flow, case.box)) != "planar":
        return 1
    return len(case.modes.kz or default_wavenumbers(case.box))


def modes_progress(case, sink, command: str = "modes"):
    """A ``progress(text)`` callable for :func:`kindyn.eigen.solve.solve_modes` that sends
    :class:`Progress` updates (solve i of n, elapsed, ETA) to ``sink``."""
    total = solve_count(case)
    meter = CountEta(total)
    calls = [0]

    def progress(text: str) -> None:
        done = calls[0]
        calls[0] += 1
        elapsed, eta, fraction = meter.at(done)
        if done == 0:
            eta = None
        where = f"solve {done + 1}/{total}: " if total > 1 else ""
        sink(Progress(command, f"  {where}{text}", elapsed, eta, fraction, "remaining solves"))

    return progress


def modes_cautions(case, outcome, summary: dict) -> list[str]:
    """The cautions of an eigen-solve (time-step error, resolution, convergence)."""
    cautions = [TIME_STEP_CAUTION.format(dt=outcome.time_step)]
    if outcome.resolution_warning:  # either criterion (kindyn.eigen.solve: spectrum, diffusive scale)
        cautions.insert(0, outcome.resolution_caution or resolution_caution(
            outcome.cutoff_ratio, case.run.resolution_threshold, what="leading eigenfield's spectrum"))
    if not summary["converged"]:
        cautions.append(f"the leading eigenvalue did not converge: {summary['stop_reason']} (residual "
                        f"{outcome.leading.residual:.2g}, modes.tolerance {case.modes.tolerance:g})")
    return cautions


def modes_figure_of(path, case, outcome, summary, style=None) -> None:
    """The figure of the leading eigenfield (``kindyn modes`` and :meth:`kindyn.api.ModesResult.figure`)."""
    from kindyn.output.figures import FigureStyle
    from kindyn.output.figures_modes import modes_figure

    lead = outcome.leading
    where = f", $k_z$ = {lead.kz:.4g}" if outcome.method == "planar" else ""
    omega = 0.0 if abs(lead.frequency) < 1e-12 else lead.frequency
    from kindyn.output.figures import rounded

    gamma = rounded(summary["growth_rate"], summary["growth_rate_error"], sign=True)
    modes_figure(path, leading_slices(case, outcome),
                 f"{case.name}: leading mode $p = \\gamma + i\\omega$, $\\gamma$ = {gamma}, "
                 f"$\\omega$ = {omega:.6g}{where}; Rm = {case.Rm:.4g}",
                 warning="possibly under-resolved" if outcome.resolution_warning else "",
                 converged=bool(summary["converged"]), stop_reason=summary.get("stop_reason") or "",
                 style=style or FigureStyle.from_output(case.output))


def summary_of(case, outcome) -> dict:
    lead = outcome.leading
    point = point_summary(case, outcome)
    return {
        "eigenvalues": [[m.growth_rate, m.frequency] for m in outcome.modes],
        "residuals": [m.residual for m in outcome.modes],
        "vertical_wavenumbers": [m.kz for m in outcome.modes] if outcome.method == "planar" else None,
        "growth_rate": lead.growth_rate,
        "growth_rate_error": point["growth_rate_error"],
        "frequency": lead.frequency,
        "converged": point["converged"],
        "stop_reason": point["stop_reason"],
        "method": outcome.method,
        "periodic": outcome.periodic,
        "frequency_modulus": outcome.frequency_modulus,
        "z_independent": outcome.z_independent,
        "time_step": outcome.time_step,
        "propagation_time": outcome.propagation_time,
        "propagations": outcome.applications,
        "cutoff_ratio": outcome.cutoff_ratio,
        "resolution_warning": bool(outcome.resolution_warning),
        "mean_field_kept": False,
        "Rm": case.Rm,
        "eta": case.eta,
        "U": case.flow.speed,
        "k_f": case.flow.wavenumber,
        "wall_seconds": outcome.wall_seconds,
    }


def eigenvalue_table(outcome) -> list[str]:
    planar = outcome.method == "planar"
    head = f"  {'#':>2}  {'gamma':>14}  {'omega':>14}  {'residual':>9}" + ("  kz" if planar else "")
    lines = [head]
    for j, m in enumerate(outcome.modes):
        line = f"  {j:>2}  {m.growth_rate:+14.8f}  {m.frequency:+14.8f}  {m.residual:9.2e}"
        if planar:
            line += f"  {m.kz:.6g}"
        lines.append(line)
    if outcome.periodic:
        lines.append(f"  (Floquet exponents: omega is defined modulo 2 pi/T = {outcome.frequency_modulus:.6g})")
    if planar:
        lines.append("  (planar reduction: each eigenvalue at kz has its complex conjugate at -kz)")
    else:
        lines.append("  (an exactly degenerate eigenvalue, e.g. from a symmetry of the flow, may be listed once)")
    return lines


def leading_slices(case, outcome) -> list:
    """Panels of ``|B|`` of the leading eigenfield (envelope ``sqrt(|B_real|^2 + |B_imag|^2)``)."""
    real, imag = outcome.fields[0]
    magnitude = np.sqrt(np.sum(real**2 + imag**2, axis=0))
    Lx, Ly, Lz = case.box.lengths
    if outcome.method == "box":
        return [("|B| on z = 0", magnitude[:, :, 0], (Lx, Ly), ("x", "y")),
                ("|B| on y = 0", magnitude[:, 0, :], (Lx, Lz), ("x", "z")),
                ("|B| on x = 0", magnitude[0, :, :], (Ly, Lz), ("y", "z"))]
    kz = outcome.leading.kz
    # B = Re[b exp(i kz z)] on the plane y = 0 over one vertical wavelength (or 2 pi when kz = 0)
    height = 2 * math.pi / kz if kz > 0 else Lz
    z = np.linspace(0, height, 48, endpoint=False)
    phase = np.exp(1j * kz * z)
    b0 = real[:, :, 0] + 1j * imag[:, :, 0]
    section = np.sqrt(np.sum(np.real(b0[:, :, None] * phase[None, None, :]) ** 2, axis=0))
    return [("|b| (envelope over z)", magnitude, (Lx, Ly), ("x", "y")),
            ("|B| on y = 0", section, (Lx, height), ("x", "z"))]


def leading_line(summary: dict, outcome) -> str:
    lead = outcome.leading
    where = f" at kz = {lead.kz:.6g}" if outcome.method == "planar" else ""
    state = "converged" if summary["converged"] else f"NOT converged ({summary['stop_reason']})"
    return (f"leading eigenvalue{where}: growth rate gamma = "
            f"{with_error(summary['growth_rate'], summary['growth_rate_error'], sign=True)}, frequency omega = "
            f"{number_text(summary['frequency'])}, {state} (residual {lead.residual:.2g}); "
            f"Rm = {number_text(summary['Rm'])}, eta = {number_text(summary['eta'])}")


def case_with_count(args):
    """The case of ``args`` with ``--count N`` as the case key ``modes.count`` (so that it passes the
    same checks: the unknowns of the grid and the memory estimate, :mod:`kindyn.case.budget`); an
    error in it names ``--count``."""
    from kindyn.case import load_case
    from kindyn.commands.common import figure_overrides

    if args.count is None:
        return case_from_args(args)
    if args.count < 1:
        raise CaseError("", "--count", args.count, "a whole number >= 1")
    try:
        return load_case(args.case, [*args.overrides, f"modes.count={int(args.count)}", *figure_overrides(args)])
    except CaseError as exc:
        if exc.key == "modes.count":
            raise CaseError("", "--count", args.count, exc.expected) from None
        raise


def execute(args) -> int:
    report = Reporter("modes", args)
    case = case_with_count(args)
    out = output_folder(args, case, [f"{case.name}-modes.nc", f"{case.name}-modes.{case.output.figure_format}"])
    nc_path, png_path = out / f"{case.name}-modes.nc", out / f"{case.name}-modes.{case.output.figure_format}"
    report.progress(f"kindyn modes {case.path}: {case.flow_type} flow, grid {list(case.box.grid)}, "
                    f"Rm = {case.Rm:.6g} (eta = {case.eta:.6g})")
    progress = None if report.quiet else modes_progress(case, lambda p: report.update(p, force=True))
    outcome = solve_modes(case, progress=progress)  # --count is case.modes.count
    summary = summary_of(case, outcome)
    cautions = modes_cautions(case, outcome, summary)
    from kindyn.output.modes_file import write_modes_file

    figure = None
    with results_kept(lambda: {**summary, "cautions": cautions}):  # if a file cannot be written
        write_modes_file(nc_path, case, outcome, summary, cautions, command=report.command_line)
        if case.output.figure and outcome.fields:
            modes_figure_of(png_path, case, outcome, summary)
            figure = str(png_path)
    summary["output"] = str(nc_path)
    summary["figure"] = figure
    summary["cautions"] = cautions
    for line in eigenvalue_table(outcome):
        report.result(line)
    report.result(leading_line(summary, outcome))
    for caution in cautions:
        report.caution(caution)
    report.result(f"{outcome.applications} propagations over T = {outcome.propagation_time:.4g} "
                  f"(dt = {outcome.time_step:.4g}), {outcome.wall_seconds:.1f} s; wrote {nc_path}"
                  + (f" and {png_path}" if figure else ""))
    report.finish(summary)
    return 0
