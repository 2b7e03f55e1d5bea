"""The entry points of kindyn as a library: what the command line does, without printing.

A notebook session::

    import kindyn
    case = kindyn.load_case("cases/abc-first-window.toml", overrides=["domain.grid=[16,16,16]"])
    outcome = kindyn.growth(case)              # growth rate, frequency, record, final field
    outcome.estimate.growth_rate, outcome.estimate.error
    modes = kindyn.eigenmodes(case)            # leading eigenvalues (Krylov)
    tensors = kindyn.coefficients(case)        # alpha, eta tensors with SOCA beside them
    stats = kindyn.flow_statistics(case)       # u_rms, helicity, spectra, SOCA estimates
    sweep = kindyn.parameter_sweep("cases/sweep-abc-rm.toml", out="kindyn-output")

(The names differ from the subpackages ``kindyn.run``, ``kindyn.testfield`` and ``kindyn.sweep``,
which hold the drivers.)

Every function takes a validated :class:`~kindyn.case.Case` (from :func:`load_case`) and returns
the same outcome object the command uses; nothing is printed unless a ``progress`` callable is
given. Errors are the same :class:`~kindyn.errors.CaseError` (file, key, value, expected) and
:class:`~kindyn.errors.NumericalError` types. The command line (:mod:`kindyn.cli`) is a thin layer
over these functions plus the output files.

Cautions that apply to every result: an under-resolved grid can show spurious growth (check
``resolution_warning`` and repeat on a finer grid); SOCA values hold only at small Rm or short
correlation time.
"""

from __future__ import annotations

from pathlib import Path


def load_case(path, overrides=(), text: str | None = None):
    """Read, override (``"section.key=value"`` strings, values as TOML) and validate a case file, and
    build its box and flow. ``text`` gives the case as a string instead of reading ``path`` (which
    then only names it in messages). Raises :class:`~kindyn.errors.CaseError` before any computation."""
    from kindyn.case.load import load_case as _load

    return _load(path, overrides, text=text)


def growth(case, progress=None, checkpoint=None):
    """Time-step ``case`` until its growth rate converges (or a guard stops it).

    ``progress(t, estimate, tolerance)`` is called now and then; ``checkpoint`` (a
    :class:`kindyn.output.checkpoint.Checkpoint`) makes a long run resumable. Returns a
    :class:`kindyn.run.RunOutcome` (``estimate.growth_rate``, ``estimate.error``, ``estimate.frequency``,
    ``estimate.converged``, ``record``, ``field``, ``resolution_warning``, ...)."""
    from kindyn.run import run_growth

    return run_growth(case, progress=progress, checkpoint=checkpoint)


def eigenmodes(case, count: int | None = None, progress=None, with_fields: bool = True):
    """Leading eigenvalues ``p = gamma + i omega`` (and eigenfields) of a steady or time-periodic flow by
    a Krylov method; a :class:`kindyn.eigen.solve.ModesOutcome`. ``progress(text)`` hears of each solve."""
    from kindyn.eigen.solve import solve_modes

    return solve_modes(case, count=count, progress=progress, with_fields=with_fields)


def coefficients(case, progress=None):
    """alpha and eta tensors by the test-field method with SOCA beside them; a
    :class:`kindyn.testfield.calibration.TestFieldResult`. ``progress(text)`` is told how it goes."""
    from kindyn.testfield.calibration import calibrate

    return calibrate(case, progress=progress)


def flow_statistics(case):
    """What the case's flow is at ``t = 0`` on its grid: u_rms, helicity, spectra, divergence and the
    steady-flow SOCA estimates; a :class:`kindyn.diagnostics.flow_stats.FlowStatistics`."""
    from kindyn.assemble import transform_settings
    from kindyn.diagnostics import flow_stats
    from kindyn.layout import BoxLayout

    layout = BoxLayout(case.box, transform_settings(case.numerics, precision="double"))
    u = layout.sample_velocity(case.flow, 0.0)
    return flow_stats.flow_statistics(u, layout.spectral_from_physical(u), layout, case.eta)


def parameter_sweep(path, overrides=(), out="kindyn-output", workers: int | None = None, threads: int | None = None,
          scheduler: str | None = None, refine: bool | None = None, grids=None, progress=None):
    """Run the ``[sweep]`` of the case file ``path`` (growth rate versus Rm or any key), resumably, with
    points written under ``out``; a :class:`kindyn.sweep.driver.SweepResult` (rows, critical values,
    dynamo windows, summary file). ``workers``/``threads`` run local processes, ``scheduler`` an
    existing Dask scheduler; ``progress(text)`` hears of each point."""
    from kindyn.sweep.driver import SweepOptions, run_sweep

    options = SweepOptions(out=Path(out), workers=workers, threads=threads, scheduler=scheduler, refine=refine,
                           grids=grids, say=progress)
    return run_sweep(path, overrides, options)


__all__ = ["coefficients", "eigenmodes", "flow_statistics", "growth", "load_case", "parameter_sweep"]
