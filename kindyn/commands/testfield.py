"""``kindyn testfield CASE.toml``: alpha and eta (beta) tensors by the test-field method, beside SOCA.

Settings come from the case's ``[testfield]`` section (see :mod:`kindyn.testfield.settings`).
Writes ``NAME-testfield.nc`` (all tensors with errors) and ``NAME-testfield.png`` (alpha and eta_t
versus K with SOCA) into ``--out``; ``--json`` prints one object on stdout with at least ``alpha``,
``alpha_soca`` (3 x 3, row = EMF component), ``K``, ``alpha_K``, ``eta_K``, ``alpha_K_soca``,
``eta_K_soca`` (one 3 x 2 list per K: row = EMF component x, y, z; column = the two mean-field
components perpendicular to the averaging axis, in x, y, z order), ``Rm``, ``eta``, ``converged``,
``cautions``.

The text report (stdout; progress on stderr) shows every coefficient with its error (value +- error,
the error rounded to one significant digit and the value to the same place; direct steady solves
have no statistical error, which the report says once): the uniform-field ``alpha_ij`` (3 x 3,
full and SOCA), the full ``alpha_ij(K)`` and ``eta_ij(K)`` blocks (3 x 2, off-diagonal terms
included) with their in-plane means beside SOCA, the kernel fits (and which parameter each fixed),
the closure check rounded to its error, and the cautions. With ``testfield.all_directions`` it
adds the tables of the other two averaging directions, ``beta_ijk`` (the determined components) and
Rädler's decomposition (symmetric alpha, gamma, eta_ij, symmetric beta, delta, the determined kappa),
each beside SOCA, and which components are not determined; findings (negative eddy or total
diffusivity) are printed as cautions with their errors. With ``testfield.realisations = N > 1`` the
N realisations (flow seeds s, s+1, ...) run as sweep points (``--workers``, ``--threads-per-run``, or
``--scheduler`` for Dask; :mod:`kindyn.sweep.testfield_ensemble`) and the report shows the ensemble
means with combined standard errors (:mod:`kindyn.testfield.ensemble`), flagged as under-resolved
when any realisation is (``resolution``: the worst realisation's check, ``flagged_seeds``). JSON keys beyond those above:
:mod:`kindyn.testfield.summary`.

Progress (stderr, off with ``--quiet``) carries the elapsed time and an ETA (:func:`testfield_progress`):
for direct steady solves, one line per test field (solve i of n) with an ETA, from the second solve on,
at the mean time per solve;
for time stepping, the worst error / tolerance ratio of the coefficients, whose fall with time gives
the time it reaches 1 (:class:`kindyn.commands.progress.GrowthEta`, as for a growth run; capped by
``testfield.max_time`` when the case gives one).
"""

from __future__ import annotations

import math
import time

import numpy as np

from kindyn.commands.common import (Reporter, add_case_arguments, add_figure_arguments, add_quiet_argument,
                                    case_from_args, number_text, output_folder, results_kept,
                                    with_error)
from kindyn.testfield.calibration import calibrate
from kindyn.testfield.kernels import LorentzianFit
from kindyn.testfield.summary import file_attributes, summary_of as _summary_of

HELP = "alpha and eta (beta) tensors of the flow by the test-field method, beside SOCA"


def add_arguments(parser) -> None:
    add_case_arguments(parser)
    add_quiet_argument(parser)
    add_figure_arguments(parser)
    group = parser.add_argument_group("ensembles (testfield.realisations > 1): where the realisations run")
    group.add_argument("--workers", type=int, default=None, metavar="W",
                       help="local worker processes (default: cores / threads-per-run)")
    group.add_argument("--threads-per-run", type=int, default=None, metavar="T", help="threads of each realisation")
    group.add_argument("--scheduler", default=None, metavar="ADDRESS",
                       help="run the realisations on this Dask scheduler (address or scheduler file)")



def testfield_progress(case, plan, sink, command: str = "testfield", clock=time.monotonic):
    """A ``progress(report)`` callable for :func:`kindyn.testfield.calibration.calibrate` that sends
    :class:`~kindyn.commands.progress.Progress` updates with an ETA to ``sink(update, force)`` (``force``
    is True: the driver reports at most every two seconds itself; see the module docstring). A report
    (:class:`~kindyn.testfield.calibration.CalibrationProgress`) of a direct solve carries ``solved`` of
    ``solves``, one of time stepping its ``time`` and ``worst_ratio``."""
    from kindyn.commands.progress import GrowthEta, Progress

    started = clock()
    limit = plan.max_time if plan.max_time else math.inf
    growth = GrowthEta(1.0, limit, plan.min_time, clock)
    first = [started]

    def progress(report) -> None:
        elapsed = clock() - started
        if report.solved is not None:
            done, total = report.solved, report.solves
            if done == 1:  # the set-up (layout, kernels, onset check) came before: time the solves from here
                first[0] = clock()
            eta = (clock() - first[0]) / (done - 1) * (total - done) if done > 1 else None
            sink(Progress(command, f"  solve {done}/{total}: {report.text}", elapsed, eta, done / total,
                          "remaining solves"), True)
            return
        if report.time is not None and math.isfinite(report.time):
            elapsed, eta, fraction, until = growth.observe(report.time, report.worst_ratio)
            if eta is not None and not math.isfinite(eta):
                eta, fraction, until = None, None, ""
            sink(Progress(command, "  " + report.text, elapsed, eta, fraction, until), True)  # the driver throttles
            return
        sink(Progress(command, "  " + report.text, elapsed), True)

    return progress


def summary_of(case, result) -> dict:
    """The JSON summary (:func:`kindyn.testfield.summary.summary_of`) with the closure check's errors."""
    return _summary_of(case, result, closure_with_errors(result) if result.closure else None)


def _fit_callables(fits: dict) -> dict:
    out = {}
    for key, f in fits.items():
        if f.get("c0") is not None and math.isfinite(f["c0"]) and math.isfinite(f["kc"]):
            out[key] = LorentzianFit(f["c0"], f["kc"], f["kc_fixed"], f["rms_relative_misfit"])
    return out


def direct_growth_run(case):
    """The closure check's direct run (``kindyn run`` on the same case): ``(rate, error, field_hat)``."""
    from kindyn.run import run_growth

    outcome = run_growth(case)
    return outcome.estimate.growth_rate, outcome.estimate.error, outcome.field_hat


def closure_with_errors(result) -> dict:
    """The closure report with ``mean_field_growth_rate_error`` (``K |d alpha| + K^2 d eta_t`` from the
    coefficient errors; None for a direct steady solve, which has none) and ``relative_difference_error``
    (first-order propagation of both errors)."""
    c = dict(result.closure)
    K = c["K"]
    i = list(np.round(result.K, 12)).index(round(K, 12)) if round(K, 12) in list(np.round(result.K, 12)) else None
    ea, eh = result.horizontal_errors()
    dp = math.nan if i is None else K * abs(float(ea[i])) + K ** 2 * abs(float(eh[i]))
    c["mean_field_growth_rate_error"] = dp if math.isfinite(dp) else None
    p, g, dg = c["mean_field_growth_rate"], c.get("direct_growth_rate"), c.get("direct_growth_rate_error")
    rel = None
    if c.get("relative_difference") is not None and g:
        dp0 = dp if math.isfinite(dp) else 0.0
        dg0 = float(dg) if dg is not None and math.isfinite(float(dg)) else math.nan
        rel = math.hypot(dp0 / abs(g), abs(p) * dg0 / g ** 2)
    c["relative_difference_error"] = rel if rel is not None and math.isfinite(rel) else None
    return c


def _cell(value, error, floor: float = 0.0) -> str:
    """``value +- error``; without an error (direct solve) 6 significant digits, and ``0`` at or below
    ``floor`` (the solver-residual level)."""
    if error is None or not math.isfinite(float(error)):
        if value is not None and math.isfinite(float(value)) and abs(float(value)) <= floor:
            return "0"
        return number_text(value, 6, sign=True)
    return with_error(value, error, sign=True)


def _residual_level(result) -> float:
    """Relative size below which a direct solve's entries are zero within its accuracy (its GMRES
    residual, at least 1e-13); 0 for time-stepped results, which carry errors."""
    if result.method != "direct":
        return 0.0
    residual = result.solver.get("max_relative_residual") or 0.0
    return max(float(residual), 1e-13) if math.isfinite(float(residual)) else 0.0


def _table(rows, row_names, column_names, width) -> list[str]:
    head = "      " + "".join(f"{name:>{width}}" for name in column_names)
    return [head] + [f"    {r} " + "".join(f"{cell:>{width}}" for cell in row) for r, row in zip(row_names, rows)]


def error_kind(result) -> str:
    if result.method == "direct":
        residual = result.solver.get("max_relative_residual")
        return ("errors: none statistical (direct steady solve, exact up to the GMRES relative residual "
                f"{number_text(residual, 2)}); values to 6 significant digits, 0 where below the residual level "
                f"{number_text(_residual_level(result), 2)} of the tensor's largest entry")
    return f"errors: {result.solver.get('kind', 'time stepping')}: standard errors of the block means"


def text_report(case, result) -> list[str]:
    """The lines of the text report (see module docstring)."""
    t, e = result.tensors, result.errors
    axes = "xyz"
    perp = [axes[j] for j in range(3) if j != result.axis]
    state = "converged" if result.converged else f"NOT converged ({result.stop_reason})"
    lines = [f"{case.name}: {case.flow_type} flow, Rm = {case.Rm:.6g} (eta = {case.eta:.6g}), averages over "
             f"planes normal to {axes[result.axis]}, method {result.method}: {state}", error_kind(result)]

    level = _residual_level(result)

    def cells(values, errors):
        errors = np.full_like(values, np.nan) if errors is None else errors
        finite = np.abs(values)[np.isfinite(values)]
        floor = level * float(finite.max()) if finite.size else 0.0
        return [[_cell(v, er, floor) for v, er in zip(vr, err)] for vr, err in zip(values, errors)]

    for name, label in (("alpha", "alpha_ij"), ("alpha_soca", "SOCA alpha_ij")):
        if t.get(name) is not None:
            rows = cells(t[name], e.get(name))
            width = max(12, *(len(c) + 2 for r in rows for c in r))
            lines.append(f"uniform test fields: {label} (row i = EMF component, column j = field component)")
            lines += _table(rows, axes, axes, width)
    a, h = result.horizontal()
    ea, eh = result.horizontal_errors()
    a_s, h_s = result.horizontal(soca=True)
    for n, K in enumerate(result.K):
        rows_a = cells(t["alpha_K"][n], e["alpha_K"][n])
        rows_h = cells(t["eta_K"][n], e["eta_K"][n])
        width = max(12, *(len(c) + 2 for r in rows_a + rows_h for c in r))
        lines.append(f"K = {K:.6g}: alpha_ij(K) | eta_ij(K) (row i = EMF component, column j = {', '.join(perp)})")
        head = "      " + "".join(f"{'alpha_i' + j:>{width}}" for j in perp) + "   |" + \
            "".join(f"{'eta_i' + j:>{width}}" for j in perp)
        lines.append(head)
        for r, ra, rh in zip(axes, rows_a, rows_h):
            lines.append(f"    {r} " + "".join(f"{c:>{width}}" for c in ra) + "   |" + "".join(f"{c:>{width}}" for c in rh))
        lines.append(f"    in-plane means: alpha = {_cell(a[n], ea[n])} (SOCA {number_text(a_s[n], 6, True)}), "
                     f"eta_t = {_cell(h[n], eh[n])} (SOCA {number_text(h_s[n], 6, True)})")
    for key, label in (("alpha", "alpha"), ("eta_t", "eta_t"), ("alpha_soca", "SOCA alpha"),
                       ("eta_t_soca", "SOCA eta_t")):
        f = result.fits.get(key)
        if f:
            lines.append(f"kernel fit {label}(K) = c_0/(1 + (K/k_c)^2): c_0 = {number_text(f['c0'], 5, True)}, "
                         f"k_c = {number_text(f['kc'], 5)}, rms relative misfit {number_text(f['rms_relative_misfit'], 2)}"
                         + (f" ({f['note']})" if f.get("note") else ""))
    if result.closure:
        c = closure_with_errors(result)
        p = _cell(c["mean_field_growth_rate"], c["mean_field_growth_rate_error"])
        if c["mean_field_growth_rate_error"] is None:
            p += " (no statistical error)"
        g = c.get("direct_growth_rate")
        direct = "n/a" if g is None or not math.isfinite(g) else with_error(g, c.get("direct_growth_rate_error"), True)
        rel = c.get("relative_difference")
        rel_text = "n/a" if rel is None else with_error(rel, c["relative_difference_error"])
        lines.append(f"closure (K = {c['K']:.4g}): mean-field p = |alpha| K - (eta + eta_t) K^2 = {p}; direct run "
                     f"gamma = {direct}; relative difference {rel_text}")
    return lines


def _direction_tables(result, cells) -> list[str]:
    """The planar tables of the averaging directions other than the case's (all_directions)."""
    lines = []
    axes = "xyz"
    for s in result.directions:
        if s == result.axis:
            continue
        perp = [axes[j] for j in range(3) if j != s]
        a, h = result.horizontal(axis=s)
        ea, eh = result.horizontal_errors(axis=s)
        a_s, h_s = result.horizontal(soca=True, axis=s)
        for n, K in enumerate(result.K):
            rows_a = cells(result.planar("alpha_K", s)[n], result.planar("alpha_K", s, errors=True)[n])
            rows_h = cells(result.planar("eta_K", s)[n], result.planar("eta_K", s, errors=True)[n])
            width = max(12, *(len(c) + 2 for r in rows_a + rows_h for c in r))
            lines.append(f"K = {K:.6g} (averages along {axes[s]}): alpha_ij(K) | eta_ij(K) (column j = "
                         f"{', '.join(perp)})")
            lines.append("      " + "".join(f"{'alpha_i' + j:>{width}}" for j in perp) + "   |" +
                         "".join(f"{'eta_i' + j:>{width}}" for j in perp))
            for r, ra, rh in zip(axes, rows_a, rows_h):
                lines.append(f"    {r} " + "".join(f"{c:>{width}}" for c in ra) + "   |" +
                             "".join(f"{c:>{width}}" for c in rh))
            lines.append(f"    in-plane means: alpha = {_cell(a[n], ea[n])} (SOCA {number_text(a_s[n], 6, True)}), "
                         f"eta_t = {_cell(h[n], eh[n])} (SOCA {number_text(h_s[n], 6, True)})")
    return lines


def _vector(values, errors, soca, floor: float = 0.0, soca_floor: float = 0.0) -> str:
    def zero(v):
        return "0" if np.isfinite(v) and abs(v) <= soca_floor else number_text(v, 4, True)
    return "(" + ", ".join(_cell(v, e, floor) for v, e in zip(values, errors)) + ")" + \
        " [SOCA (" + ", ".join(zero(v) for v in soca) + ")]"


def _largest(*arrays) -> float:
    finite = [np.abs(np.asarray(a, float))[np.isfinite(a)] for a in arrays if a is not None]
    finite = [f for f in finite if f.size]
    return float(max(f.max() for f in finite)) if finite else 0.0


def full_set_report(result, cells) -> list[str]:
    """Lines of beta_ijk and Rädler's decomposition (see :mod:`kindyn.testfield.full_set`)."""
    from kindyn.testfield.full_set import ONE_AXIS, UNDETERMINED, determined_mask

    fs, fe = result.full_set, result.full_set_errors
    if not fs:
        return []
    axes = "xyz"
    level = _residual_level(result)
    # entries below the solver-residual level of the tensors they come from print as 0 (direct solves)
    a_scale = _largest(result.tensors.get("alpha"), *(result.planar("alpha_K", d) for d in result.directions))
    e_scale = _largest(*(result.planar("eta_K", d) for d in result.directions))
    a_soca = _largest(result.tensors.get("alpha_soca"), *(result.planar("alpha_K", d, True) for d in result.directions))
    e_soca = _largest(*(result.planar("eta_K", d, True) for d in result.directions))
    fa, fh = level * a_scale, level * e_scale
    # SOCA (spectral division) is exact to round-off: 1e-13 of its scale
    fa_s, fh_s = max(level, 1e-13) * a_soca, max(level, 1e-13) * e_soca
    lines = ["Raedler decomposition: Ebar = alpha.B + gamma x B - beta.J - delta x J - kappa.(grad B)^(s), "
             "J = curl B (signs: JSON/netCDF sign_convention_full_set)"]
    if "gamma" in fs:
        rows = cells(fs["alpha_sym"], fe.get("alpha_sym"))
        width = max(12, *(len(c) + 2 for r in rows for c in r))
        lines.append("  symmetric alpha_ij (uniform fields, K = 0)")
        lines += _table(rows, axes, axes, width)
        lines.append(f"  gamma (K = 0) = {_vector(fs['gamma'], fe['gamma'], fs['gamma_soca'], fa, fa_s)}")
    pairs = [(j, k) for j in range(3) for k in range(3) if j != k]
    for n, K in enumerate(result.K):
        g = [(axes[s], fs["gamma_K"][n, s], fe["gamma_K"][n, s], fs["gamma_K_soca"][n, s]) for s in result.directions]
        lines.append(f"  K = {K:.6g}: gamma_s(K) from the averages along s: " + ", ".join(
            f"gamma_{a} = {_cell(v, e, fa)} (SOCA {'0' if abs(vs) <= fa_s else number_text(vs, 4, True)})"
            for a, v, e, vs in g))
        b, be = fs["beta_ijk"][n], fe["beta_ijk"][n]
        shown = [(j, k) for j, k in pairs if np.isfinite(b[:, j, k]).all()]
        if shown:
            head = [f"b_i{axes[j]}{axes[k]}" for j, k in shown]
            rows = cells(np.array([[b[i, j, k] for j, k in shown] for i in range(3)]),
                         np.array([[be[i, j, k] for j, k in shown] for i in range(3)]))
            width = max(12, *(len(c) + 2 for r in rows for c in r))
            lines.append("    beta_ijk(K), determined components (j != k; rows i):")
            lines += _table(rows, axes, head, width)
        if "eta_ij" in fs:
            for key, label in (("eta_ij", "eta_il (Ebar = ... - eta . J)"), ("beta_sym", "symmetric beta_ij")):
                rows = cells(fs[key][n], fe[key][n])
                width = max(12, *(len(c) + 2 for r in rows for c in r))
                lines.append(f"    {label}; SOCA trace/3 = {number_text(np.trace(fs[key + '_soca'][n]) / 3, 5, True)}")
                lines += _table(rows, axes, axes, width)
            lines.append("    delta (Raedler effect) = "
                         f"{_vector(fs['delta'][n], fe['delta'][n], fs['delta_soca'][n], fh, fh_s)}")
            kp = [(j, k) for j in range(3) for k in range(j + 1, 3)]
            rows = cells(np.array([[fs["kappa"][n][i, j, k] for j, k in kp] for i in range(3)]),
                         np.array([[fe["kappa"][n][i, j, k] for j, k in kp] for i in range(3)]), e_scale)
            width = max(12, *(len(c) + 2 for r in rows for c in r))
            lines.append("    kappa_ijk, determined components (j != k, symmetric in j, k; rows i):")
            lines += _table(rows, axes, [f"k_i{axes[j]}{axes[k]}" for j, k in kp], width)
        else:
            lines.append("    delta_planar (= delta_s - (kappa_pps + kappa_qqs)/2) = " + ", ".join(
                f"{axes[s]}: {_cell(fs['delta_planar'][n, s], fe['delta_planar'][n, s], fh)}" for s in result.directions))
    missing = int((~determined_mask()).sum())
    lines.append(f"not determined ({missing} components of beta_ijk, NaN in the files): " + UNDETERMINED)
    if len(result.directions) < 3:
        lines.append(ONE_AXIS)
    return lines


def finding_lines(result) -> list[str]:
    out = []
    for f in result.findings:
        err = f" +- {number_text(f['error'], 2)}" if f.get("error") is not None else " (no statistical error)"
        state = "significant" if f["significant"] else "within 2 errors of zero"
        out.append(f"finding: {f['text']}{err} ({state})")
    return out


def _figure(case, result, path) -> None:
    from kindyn.output.figures import FigureStyle
    from kindyn.output.figures_testfield import coefficients_versus_K

    note = "" if result.converged else f"NOT converged: {result.stop_reason}"
    directions = {}
    for s in result.directions:
        a, h = result.horizontal(axis=s)
        a_s, h_s = result.horizontal(soca=True, axis=s)
        ea, eh = result.horizontal_errors(axis=s)
        directions["xyz"[s]] = (a, ea, h, eh, a_s, h_s)
    a, ea, h, eh, a_s, h_s = directions["xyz"[result.axis]]
    coefficients_versus_K(path, result.K, a, ea, h, eh, a_s, h_s,
                          f"{case.name}: {case.flow_type}, Rm = {case.Rm:.4g}, average over planes normal "
                          f"to {'xyz'[result.axis]}", fits=_fit_callables(result.fits), note=note,
                          alpha_uniform=(result.uniform_alpha(), result.uniform_alpha(soca=True)),
                          other_directions={k: v for k, v in directions.items() if k != "xyz"[result.axis]},
                          gamma=(result.full_set["gamma_K"], result.full_set_errors.get("gamma_K"),
                                 result.full_set.get("gamma_K_soca")) if "gamma_K" in result.full_set else None,
                          converged=result.converged, style=FigureStyle.from_output(case.output))


def _ensemble(case, plan, args, report, out):
    """Calibrate the realisations through the sweep pools and combine them (module docstring)."""
    from kindyn.sweep.testfield_ensemble import run_ensemble
    from kindyn.testfield.calibration import TestFieldResult
    from kindyn.testfield.ensemble import ensemble_result
    from kindyn.commands.common import figure_overrides

    first = int(case.flow.seed)
    text = case.text
    members = run_ensemble(case.path, text, [*args.overrides, *figure_overrides(args)], plan.realisations, first,
                           out / f"{case.name}-realisations", workers=args.workers, threads=args.threads_per_run,
                           scheduler=args.scheduler, say=report.progress)
    base = TestFieldResult(plan.axis, plan.modes, np.array(plan.wavenumbers), plan.method, case.Rm, case.eta,
                           case.flow.speed, case.flow.wavenumber, False, "", directions=plan.directions)
    result = ensemble_result(base, members, [m["seed"] for m in members])
    if plan.closure:
        result.notes.append("closure check skipped for an ensemble (testfield.closure applies to one realisation)")
    return result


def execute(args) -> int:
    report = Reporter("testfield", args)
    case = case_from_args(args)
    from kindyn.output.figures import FigureStyle
    from kindyn.testfield.settings import plan_from_case

    plan = plan_from_case(case)  # every check that needs the box, before any output folder is made
    png_name = FigureStyle.from_output(case.output).path(".", f"{case.name}-testfield").name
    realisations = ([f"{case.name}-realisations/points/{case.fingerprint}.testfield.{suffix}" for suffix in
                     ("nc", "json")] if plan.realisations > 1 else [])  # the records of the realisations
    out = output_folder(args, case, [f"{case.name}-testfield.nc", png_name, *realisations])
    nc_path = out / f"{case.name}-testfield.nc"
    png_path = out / png_name
    progress = None if report.quiet else testfield_progress(case, plan, report.update)
    report.progress(f"kindyn testfield {case.path}: {case.flow_type} flow, grid {list(case.box.grid)}, "
                    f"Rm = {case.Rm:.6g} (eta = {case.eta:.6g})"
                    + (f", {plan.realisations} realisations" if plan.realisations > 1 else ""))
    if plan.realisations > 1:
        result = _ensemble(case, plan, args, report, out)
    else:
        result = calibrate(case, progress=progress, direct_run=direct_growth_run)
    from kindyn.commands.processes import launched_rank

    if launched_rank() != 0:  # one of several MPI processes, not the first: that one writes and reports
        return 0
    summary = summary_of(case, result)
    from kindyn.output.testfield_file import ensemble_variables, result_variables, write_testfield_file

    cautions = list(result.notes)
    if result.closure and result.closure.get("caution"):
        cautions.append(f"closure check: {result.closure['caution']}")
    cautions += finding_lines(result)
    summary["cautions"] = cautions
    variables = result_variables(result)
    if result.members:
        variables.update(ensemble_variables([m["tensors"] for m in result.members], result.ensemble["seeds"]))
        summary["ensemble"]["members"] = [{"seed": m["seed"], "output": m["output"], "converged": m["converged"]}
                                          for m in result.members]
    with results_kept(lambda: summary):  # if a file cannot be written
        write_testfield_file(nc_path, case, summary, variables, file_attributes(result, summary, cautions),
                             result.K, summary["mean_components"], command=report.command_line,
                             members=len(result.members) if result.members else None)
        if case.output.figure:
            _figure(case, result, png_path)
    summary["output"] = str(nc_path)
    summary["figure"] = str(png_path) if case.output.figure else None
    level = _residual_level(result)

    def cells(values, errors, scale=None):
        values = np.asarray(values, float)
        errors = np.full_like(values, np.nan) if errors is None else np.asarray(errors, float)
        finite = np.abs(values)[np.isfinite(values)]
        floor = level * (scale if scale is not None else float(finite.max()) if finite.size else 0.0)
        return [[_cell(v, er, floor) for v, er in zip(vr, err)] for vr, err in zip(values, errors)]

    for line in text_report(case, result) + _direction_tables(result, cells) + full_set_report(result, cells):
        report.result(line)
    if result.ensemble:
        report.result(f"ensemble: {result.ensemble['count']} realisations (flow seeds {result.ensemble['seeds'][0]} .. "
                      f"{result.ensemble['seeds'][-1]}); {result.ensemble['combination']}")
    for caution in cautions:
        report.caution(caution)
    report.result(f"wrote {nc_path}" + (f" and {png_path}" if case.output.figure else ""))
    report.finish(summary)
    return 0
