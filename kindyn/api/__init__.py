"""The entry points of kindyn as a library: what the command line does, without printing.

A notebook session::

    import kindyn
    case = kindyn.load_case("cases/abc-first-window.toml", overrides=["domain.grid=[16,16,16]"])
    run = kindyn.growth(case)                  # run.growth_rate, run.growth_rate_error, run.converged
    ds = run.to_xarray()                       # the netCDF record as an xarray.Dataset
    run.figure("abc.pdf")                      # the figure of `kindyn run`, as PDF
    modes = kindyn.eigenmodes(case)            # leading eigenvalues (Krylov)
    tensors = kindyn.coefficients(case)        # alpha, eta tensors with SOCA beside them
    scales = kindyn.closure(case)              # mean-field closures across scales beside direct runs
    flow = kindyn.flow_statistics(case)        # u_rms, helicity, spectra, SOCA estimates
    sweep = kindyn.parameter_sweep("cases/sweep-abc-rm.toml", out="kindyn-output")

(The names differ from the subpackages ``kindyn.run``, ``kindyn.testfield`` and ``kindyn.sweep``,
which hold the drivers.)

Cases come from a file, a TOML string or a dict, with ``overrides`` and optionally a Python
function as the flow (:mod:`kindyn.api.cases`). Every computing function takes a validated
:class:`~kindyn.case.Case` and returns a result object (:mod:`kindyn.api.results`) with the
command's numbers as attributes, ``to_xarray()``, ``to_netcdf(path)`` and ``figure(path)``.
Nothing is printed unless asked: ``progress`` is ``None`` (silent), a callable that receives
:class:`~kindyn.commands.progress.Progress` updates (``text``, ``elapsed``, ``eta``, ``fraction``),
or ``True`` for a progress bar (tqdm when it is installed, else lines on stderr). Errors are the
same :class:`~kindyn.errors.CaseError` (file, key, value, expected) and
:class:`~kindyn.errors.NumericalError` types as on the command line.

Cautions that apply to every result: an under-resolved grid can show spurious growth (check
``resolution_warning`` and ``cautions``, and repeat on a finer grid); SOCA values hold only at
small Rm or short correlation time.
"""

from __future__ import annotations

import sys
from pathlib import Path

from kindyn.api.cases import PythonFunction, load_case

__all__ = ["PythonFunction", "closure", "coefficients", "eigenmodes", "flow_statistics", "growth", "load_case",
           "parameter_sweep"]


def _command(name: str) -> str:
    return f"kindyn.api.{name} (Python)"


def _progress_sink(progress, total_known: bool = True):
    """``progress`` (None, a callable, True) as a function of one Progress update, and a closer."""
    if progress is None or progress is False:
        return None, lambda: None
    if callable(progress):
        return progress, lambda: None
    try:
        from tqdm.auto import tqdm
    except ImportError:  # optional: plain lines on stderr instead
        from kindyn.commands.progress import Throttle

        throttle = Throttle(lambda p: print(p.line(), file=sys.stderr, flush=True))
        return throttle, lambda: None
    bar = tqdm(total=100, unit="%", bar_format="{l_bar}{bar}| {n:.0f}% [{elapsed}<{remaining}] {postfix}")

    def update(p):
        if p.fraction is not None:
            bar.n = round(100 * p.fraction, 1)
        bar.set_postfix_str(p.text.strip()[:60], refresh=False)
        bar.refresh()

    def close():
        bar.n = bar.total if bar.n else bar.n
        bar.close()

    return update, close


def _checkpoint(checkpoint):
    if checkpoint is None or hasattr(checkpoint, "load"):
        return checkpoint
    from kindyn.output.checkpoint import Checkpoint

    return Checkpoint(checkpoint)


def growth(case, progress=None, checkpoint=None):
    """Time-step ``case`` until its growth rate converges (or a guard stops it); a
    :class:`~kindyn.api.results.GrowthResult` (``growth_rate``, ``growth_rate_error``, ``frequency``,
    ``converged``, ``stop_reason``, ``resolution_warning``, ``cautions``; ``estimate``, ``record``,
    ``field`` of the run).

    ``progress``: see the module docstring (updates every two seconds with an ETA).
    ``checkpoint``: a path (or a :class:`kindyn.output.checkpoint.Checkpoint`) that makes a long run
    resumable: the run resumes from it when it exists and holds the same case (``resumed``); it is
    removed when the run finishes."""
    from kindyn.api.results import GrowthResult
    from kindyn.commands.progress import growth_reporter
    from kindyn.commands.common import settle_estimate
    from kindyn.commands.run import run_cautions
    from kindyn.output.growth_file import result_summary
    from kindyn.run import run_growth

    sink, close = _progress_sink(progress)
    checkpoint = _checkpoint(checkpoint)
    try:
        outcome = run_growth(case, progress=growth_reporter(case, sink) if sink else None, checkpoint=checkpoint)
    finally:
        close()
    if checkpoint is not None:  # as `kindyn run`: a finished run needs its checkpoint no more
        checkpoint.remove()
    summary = settle_estimate(result_summary(case, outcome))
    resolution = outcome.resolution_caution if outcome.resolution_warning else ""
    cautions = run_cautions(summary, outcome, resolution)
    summary["cautions"] = cautions
    return GrowthResult(case, outcome, summary, cautions, _command("growth"))


def eigenmodes(case, count: int | None = None, progress=None, with_fields: bool = True):
    """Leading eigenvalues ``p = gamma + i omega`` (and eigenfields) of a steady or time-periodic flow
    by a Krylov method; a :class:`~kindyn.api.results.ModesResult` (``eigenvalues``, ``residuals``,
    ``growth_rate``, ``growth_rate_error``, ``frequency``, ``converged``, ``cautions``; ``fields``)."""
    from kindyn.api.results import ModesResult
    from kindyn.commands.modes import modes_cautions, modes_progress, summary_of
    from kindyn.eigen.solve import solve_modes

    sink, close = _progress_sink(progress)
    try:
        outcome = solve_modes(case, count=count, progress=modes_progress(case, sink) if sink else None,
                              with_fields=with_fields)
    finally:
        close()
    summary = summary_of(case, outcome)
    cautions = modes_cautions(case, outcome, summary)
    summary["cautions"] = cautions
    return ModesResult(case, outcome, summary, cautions, _command("eigenmodes"))


def coefficients(case, progress=None):
    """alpha and eta tensors by the test-field method with SOCA beside them (and the closure check's
    direct run when the case asks for it); a :class:`~kindyn.api.results.CoefficientsResult`."""
    from kindyn.api.results import CoefficientsResult
    from kindyn.commands.testfield import direct_growth_run, finding_lines, summary_of, testfield_progress
    from kindyn.testfield.calibration import calibrate
    from kindyn.testfield.settings import plan_from_case

    sink, close = _progress_sink(progress)
    say = testfield_progress(case, plan_from_case(case), lambda p, force: sink(p)) if sink else None
    try:
        result = calibrate(case, progress=say, direct_run=direct_growth_run)
    finally:
        close()
    summary = summary_of(case, result)
    cautions = list(result.notes)
    if result.closure and result.closure.get("caution"):
        cautions.append(f"closure check: {result.closure['caution']}")
    cautions += finding_lines(result)
    summary["cautions"] = cautions
    return CoefficientsResult(case, result, summary, cautions, _command("coefficients"))


def closure(case, progress=None):
    """The mean-field closure across scales (``kindyn closure``): for every test-field wavenumber K of
    the case's ``[testfield]`` section, the growth rate of the mean-field mode predicted from the
    test-field coefficients (steady, SOCA, local, and at the mode's own growth rate with its harmonics
    coupled) beside a direct run in the box of length 2 pi/K; a
    :class:`~kindyn.api.results.ClosureResult` (``K``, ``direct_growth_rate``, ``predictions``, ...)."""
    import time

    from kindyn.api.results import ClosureResult
    from kindyn.commands.closure import compare
    from kindyn.commands.progress import Progress

    sink, close = _progress_sink(progress)
    started = time.monotonic()
    say = (lambda text: sink(Progress("closure", "  " + text, time.monotonic() - started))) if sink else None
    try:
        comparison, table, summary, cautions = compare(case, say)
    finally:
        close()
    return ClosureResult(case, comparison, summary, cautions, _command("closure"), table)


def flow_statistics(case):
    """What the case's flow is at ``t = 0`` on its grid: u_rms, helicity, spectra, divergence and the
    steady-flow SOCA estimates; a :class:`~kindyn.api.results.FlowResult`."""
    from kindyn.api.results import FlowResult
    from kindyn.commands.flow import flow_summary, sample_flow

    u, stats = sample_flow(case)
    summary = flow_summary(case, stats)
    return FlowResult(case, stats, summary, summary["cautions"], _command("flow_statistics"), u)


def parameter_sweep(source, overrides=(), out="kindyn-output", workers: int | None = None,
                    threads: int | None = None, scheduler: str | None = None, refine: bool | None = None,
                    grids=None, progress=None, figure: bool | None = None):
    """Run the ``[sweep]`` of a case (growth rate versus Rm or any key), resumably, with points written
    under ``out``; a :class:`~kindyn.api.results.SweepResult` (``points``, ``critical``, ``windows``,
    ``resolution``, ``summary_path``, ``figure_path``, ``cautions``).

    ``source``: a case file, or TOML text or a dict (written to ``OUT/NAME-sweep-case.toml``, from
    which every point is read: the points run in other processes, so a Python function cannot be
    the flow of a sweep; name it in the case as ``function = "module:function"``). ``workers`` /
    ``threads`` run local processes, ``scheduler`` an existing Dask scheduler; ``figure`` (default:
    the case's ``output.figure``) draws the sweep figure in the case's figure style."""
    import time

    from kindyn.api.cases import is_text, toml_text
    from kindyn.api.results import SweepResult
    from kindyn.commands.common import command_environment
    from kindyn.commands.progress import Progress
    from kindyn.commands.sweep import all_cautions, draw_sweep_figure, figure_settings, json_report
    from kindyn.errors import CaseError
    from kindyn.sweep.driver import SweepOptions, run_sweep

    path = _sweep_file(source, Path(out), is_text, toml_text, CaseError)
    sink, close = _progress_sink(progress)
    started = time.monotonic()
    say = (lambda text: sink(Progress("sweep", text, time.monotonic() - started))) if sink else None
    options = SweepOptions(out=Path(out), workers=workers, threads=threads, scheduler=scheduler, refine=refine,
                           grids=grids, figure=False, say=say)
    overrides = list(overrides)
    try:
        with command_environment(_command("parameter_sweep")):
            result = run_sweep(path, overrides, options)
    finally:
        close()
    output, flow_type = figure_settings(path, overrides)
    if (output.figure if figure is None else figure):
        result.figure_path = draw_sweep_figure(result, output, flow_type)
    summary = json_report(result)
    return SweepResult(result, summary, all_cautions(result), _command("parameter_sweep"), output, flow_type)


def _sweep_file(source, out: Path, is_text, toml_text, CaseError) -> str:
    from collections.abc import Mapping

    from kindyn.case.schema import file_stem
    from kindyn.output.atomic import atomic_stream, check_output

    if not (is_text(source) or isinstance(source, Mapping)):
        return str(source)
    if isinstance(source, Mapping):
        flow = source.get("flow", {})
        if isinstance(flow, Mapping) and callable(flow.get("function")):
            raise CaseError("<dict>", "flow.function", str(flow["function"])[:80],
                            'a function named in the case, "module:function" (the points of a sweep run in other '
                            "processes, which cannot receive a Python object)")
        text = toml_text(source)
        name = source.get("output", {}).get("name", "case") if isinstance(source.get("output"), Mapping) else "case"
    else:
        text, name = source, "case"
    file = "<dict>" if isinstance(source, Mapping) else "<text>"
    try:
        file_stem(name)
    except ValueError as exc:
        raise CaseError(file, "output.name", str(name)[:80], str(exc)) from None
    path = check_output(out, [f"{name}-sweep-case.toml"], file=file) / f"{name}-sweep-case.toml"
    with atomic_stream(path, "w", encoding="utf-8") as stream:  # never a half-written case file
        stream.write(text)
    return str(path)
