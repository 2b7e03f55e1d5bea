"""``kindyn flow CASE.toml``: what flow the case describes: speeds, helicity, spectra, SOCA.

Samples the flow at ``t = 0`` on the case's grid, prints the numbers of
:mod:`kindyn.diagnostics.flow_stats` (``--json``: one object), writes ``NAME-flow.nc`` (velocity and
spectra; readable back as a ``velocity-file`` flow) and ``NAME-flow.png`` (spectra).

Where lines go (as for every command, :mod:`kindyn.commands.common`): the numbers, the files written and
the cautions on stdout; what is being computed on stderr (off with ``--quiet``); with ``--json`` one
object on stdout and the cautions also on stderr.
"""

from __future__ import annotations

from kindyn.commands.common import (Reporter, add_case_arguments, add_figure_arguments, add_quiet_argument,
                                    case_from_args, clean_number, output_folder, results_kept)
from kindyn.diagnostics.flow_stats import flow_statistics, time_dependence
from kindyn.flows.scales import scale_rule
from kindyn.assemble import transform_settings
from kindyn.layout import BoxLayout

HELP = "describe the case's flow: u_rms, helicity, spectra, divergence and SOCA estimates"

SOCA_CAUTION = ("SOCA (first-order smoothing) holds for Rm << 1; at Rm = {Rm:.3g} treat alpha_soca and "
                "eta_t_soca as order-of-magnitude guides only")
TIME_CAUTION = ("the steady-flow SOCA values do not apply to this {kind} flow (alpha_soca and eta_t_soca "
                "are null); its correlation time is {tau}")
BAND_CAUTION = ("{fraction:.3g} of <|u|^2> lies beyond the 2/3-rule band of this grid: the run would be "
                "under-resolved (and under-resolved runs can show spurious growth)")

MEASURED_CAUTION = ("{keys} measured from the flow (not declared): Rm = U/(eta k_f) follows kindyn's default "
                    "(see scale_rule); declare flow.U and flow.k_f to fix what Rm means")
MEAN_CAUTION = ("the flow has a uniform part |<u>| = {mean:.3g} (allowed by flow.mean_flow): it advects B, makes "
                "no dynamo and sweeps the rest of the flow past the field")


def add_arguments(parser) -> None:
    add_case_arguments(parser)
    add_quiet_argument(parser)
    add_figure_arguments(parser)


def sample_flow(case):
    """``(u, stats)``: the velocity ``(3, nx, ny, nz)`` at t = 0 on the case's grid and its
    :class:`~kindyn.diagnostics.flow_stats.FlowStatistics` (the command and :func:`kindyn.api.flow_statistics`)."""
    layout = BoxLayout(case.box, transform_settings(case.numerics, precision="double"))
    u = layout.sample_velocity(case.flow, 0.0)
    return u, flow_statistics(u, layout.spectral_from_physical(u), layout, case.eta)


def flow_figure_of(path, case, stats, summary, style=None) -> None:
    from kindyn.output.figures import FigureStyle
    from kindyn.output.figures_flow import flow_spectra_figure

    flow_spectra_figure(path, stats.wavenumbers, stats.energy_spectrum, stats.helicity_spectrum,
                        f"{case.name}: {case.flow_type} flow, grid {'x'.join(map(str, case.box.grid))}, t = 0, "
                        f"u_rms = {stats.u_rms:.4g}", note="; ".join(summary["cautions"]),
                        style=style or FigureStyle.from_output(case.output))


def flow_summary(case, stats) -> dict:
    """The numbers printed by ``--json`` (steady SOCA values are null for time-dependent flows)."""
    flow = case.flow
    kind, tau_c, note = time_dependence(flow)
    steady = kind == "steady"
    cautions = []
    if steady and case.Rm > 1.0:
        cautions.append(SOCA_CAUTION.format(Rm=case.Rm))
    if not steady:
        period = getattr(flow, "period", None)
        known = f"not known (the flow is periodic with period {period:g})" if period else "not known"
        cautions.append(TIME_CAUTION.format(kind=kind, tau=known if tau_c is None else f"{tau_c:g}"))
    if stats.band_fraction > 1e-6:
        cautions.append(BAND_CAUTION.format(fraction=stats.band_fraction))
    if getattr(flow, "measured_scales", ()):
        cautions.append(MEASURED_CAUTION.format(keys=" and ".join(flow.measured_scales)))
    if stats.mean_flow > 1e-6 * stats.u_rms:
        cautions.append(MEAN_CAUTION.format(mean=stats.mean_flow))
    k_f = flow.wavenumber
    return {
        "flow_type": case.flow_type,
        "time_dependence": kind,
        "time_note": note,
        "snapshot_time": 0.0,
        "u_rms": stats.u_rms,
        "max_speed": stats.max_speed,
        "mean_flow": stats.mean_flow,
        "helicity": stats.helicity,
        "omega_rms": stats.omega_rms,
        "relative_helicity": stats.relative_helicity,
        "divergence": stats.divergence,
        "band_fraction": stats.band_fraction,
        "U": flow.speed,
        "k_f": k_f,
        "scale_rule": scale_rule(flow),
        "Rm": case.Rm,
        "Rm_rms": stats.u_rms / (case.eta * k_f),
        "eta": case.eta,
        "alpha_soca": clean_number(stats.alpha_soca) if steady else None,
        "eta_t_soca": clean_number(stats.eta_t_soca) if steady else None,
        "soca_applies": steady,
        "period": getattr(flow, "period", None),
        "renewal_time": getattr(flow, "renewal_time", None),
        "correlation_time": tau_c,
        "strouhal": None if tau_c is None else stats.u_rms * k_f * tau_c,
        "cautions": cautions,
    }


def execute(args) -> int:
    report = Reporter("flow", args)
    case = case_from_args(args)
    out = output_folder(args, case, [f"{case.name}-flow.nc", f"{case.name}-flow.{case.output.figure_format}"])
    report.progress(f"kindyn flow {case.path}: {case.flow_type} flow, grid {list(case.box.grid)}, t = 0")
    u, stats = sample_flow(case)
    summary = flow_summary(case, stats)
    nc_path, png_path = out / f"{case.name}-flow.nc", out / f"{case.name}-flow.{case.output.figure_format}"
    from kindyn.output.flow_file import write_flow_file

    with results_kept(lambda: summary):  # if a file cannot be written
        write_flow_file(nc_path, case, summary, u, stats.wavenumbers, stats.energy_spectrum,
                        stats.helicity_spectrum, command=report.command_line)
        if case.output.figure:
            flow_figure_of(png_path, case, stats, summary)
    summary["output"] = str(nc_path)
    summary["figure"] = str(png_path) if case.output.figure else None
    for line in result_lines(summary):
        report.result(line)
    for caution in summary["cautions"]:
        report.caution(caution)
    report.result(f"wrote {summary['output']}" + (f" and {summary['figure']}" if summary["figure"] else ""))
    report.finish({**summary, "spectra": {"k": stats.wavenumbers, "E": stats.energy_spectrum,
                                          "H": stats.helicity_spectrum}})
    return 0


def result_lines(s: dict) -> list[str]:
    """The numbers of the text report (stdout), without the cautions and the files."""
    def num(value):
        return "n/a" if value is None else f"{value:.6g}"

    lines = [f"{s['flow_type']} flow ({s['time_dependence']}; numbers of the snapshot at t = 0)",
             f"  u_rms = {num(s['u_rms'])}   max|u| = {num(s['max_speed'])}   |<u>| = {num(s['mean_flow'])}",
             f"  U = {num(s['U'])}   k_f = {num(s['k_f'])}   eta = {num(s['eta'])}   Rm = U/(eta k_f) = {num(s['Rm'])}"
             f"   Rm_rms = u_rms/(eta k_f) = {num(s['Rm_rms'])}",
             f"  U and k_f: {s['scale_rule']}",
             f"  <u.omega> = {num(s['helicity'])}   relative helicity = {num(s['relative_helicity'])}",
             f"  ||div u||/||grad u|| = {num(s['divergence'])}   energy beyond the dealiased band: "
             f"{num(s['band_fraction'])}",
             f"  SOCA: alpha = {num(s['alpha_soca'])}   eta_t = {num(s['eta_t_soca'])}"]
    if s["time_note"]:
        lines.append(f"  time dependence: {s['time_note']}" +
                     (f"; Strouhal u_rms k_f tau_c = {s['strouhal']:.3g}" if s["strouhal"] is not None else ""))
    return lines
