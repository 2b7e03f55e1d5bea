"""Result objects of the library entry points: the numbers as attributes, the files on request.

Every result has

* the numbers of the command's ``--json`` object as attributes (``run.growth_rate``,
  ``run.growth_rate_error``, ``run.converged``, ``modes.eigenvalues``, ...; ``summary`` holds them
  all as a dict, ``cautions`` the cautions the command prints), and the driver's own outcome as
  ``outcome`` (its attributes are reachable on the result too: ``run.estimate``, ``run.record``);
* ``to_netcdf(path)``: the file the command writes, by the same writer (provenance ``command``
  names the library call);
* ``to_xarray()``: an :class:`xarray.Dataset` with the same variables, coordinates and attributes
  as that file (it is that file, written to a temporary folder and loaded into memory; xarray is
  the optional ``notebook`` extra);
* ``figure(path=None, ...)``: the command's figure (format, size and dpi from the case's
  ``[output]`` keys unless given), returning its path;
* ``str(result)``: the lines the command prints (results, then ``caution: ...`` lines).
"""

from __future__ import annotations

import tempfile
from pathlib import Path

API_COMMAND = "kindyn.api.{name} (Python)"


class Result:
    """Base of the results (see the module docstring)."""

    kind = ""
    suffix = ""

    def __init__(self, case, outcome, summary: dict, cautions: list[str], command: str):
        self.case = case
        self.outcome = outcome
        self.summary = summary
        self.cautions = list(cautions)
        self.command = command

    def __getattr__(self, name):
        if name.startswith("__") or name in ("case", "outcome", "summary", "cautions", "command"):
            raise AttributeError(name)
        summary = self.__dict__.get("summary", {})
        if name in summary:
            return summary[name]
        outcome = self.__dict__.get("outcome")
        if outcome is not None and hasattr(outcome, name):
            return getattr(outcome, name)
        raise AttributeError(f"{type(self).__name__} has no attribute {name!r}")

    def __dir__(self):
        return sorted(set(super().__dir__()) | set(self.summary))

    def lines(self) -> list[str]:
        return []

    def __str__(self) -> str:
        return "\n".join(self.lines() + [f"caution: {c}" for c in self.cautions])

    def __repr__(self) -> str:
        return f"<kindyn {type(self).__name__} of {self.case.name}: " + (self.lines() or [""])[0] + ">"

    def default_path(self, folder=".") -> Path:
        return Path(folder) / f"{self.case.name}{self.suffix}.nc"

    def to_netcdf(self, path=None) -> Path:
        """Write the netCDF file the command writes (atomically) to ``path`` (default
        ``./NAME<suffix>.nc``); returns the path."""
        path = Path(path) if path is not None else self.default_path()
        self._write(path)
        return path

    def _write(self, path: Path) -> None:  # pragma: no cover - every result has its writer
        raise NotImplementedError

    def to_xarray(self):
        """The netCDF file as an :class:`xarray.Dataset` (loaded; no file stays open or behind)."""
        try:
            import xarray
        except ImportError as exc:  # an optional dependency
            raise ImportError('to_xarray needs xarray: pip install "kindyn[notebook]"') from exc
        with tempfile.TemporaryDirectory(prefix="kindyn-") as folder:
            path = self.default_path(folder)
            self._write(path)
            with xarray.open_dataset(path) as ds:
                return ds.load()

    def figure(self, path=None, format: str | None = None, size=None, dpi: int | None = None) -> Path:
        """Draw the command's figure to ``path`` (default ``./NAME<suffix>.<format>``)."""
        from kindyn.output.figures import FigureStyle

        base = FigureStyle.from_output(self.case.output)
        style = FigureStyle(format or (Path(path).suffix.lstrip(".") if path else "") or base.format,
                            dpi or base.dpi, tuple(size) if size else base.size)
        path = Path(path) if path is not None else style.path(".", f"{self.case.name}{self.suffix}")
        self._figure(path, style)
        return path

    def _figure(self, path, style) -> None:  # pragma: no cover
        raise NotImplementedError


class GrowthResult(Result):
    """A growth run (:func:`kindyn.api.growth`, ``kindyn run``): ``growth_rate``,
    ``growth_rate_error``, ``frequency``, ``converged``, ``stop_reason``, ``Rm``, ``eta``, ...
    (``growth_rate`` is None when the run stopped before an estimate with an error existed;
    ``growth_rate_preliminary`` then holds the value reached)."""

    kind = "run"

    def lines(self):
        from kindyn.commands.run import result_lines

        return result_lines(self.summary, self.outcome)

    def _write(self, path):
        from kindyn.output.growth_file import record_growth_run

        record_growth_run(path, self.case, self.outcome, command=self.command)

    def _figure(self, path, style):
        from kindyn.commands.run import growth_figure_of

        growth_figure_of(path, self.case, self.outcome, self.summary, style)


class ModesResult(Result):
    """An eigen-solve (:func:`kindyn.api.eigenmodes`, ``kindyn modes``): ``eigenvalues`` (list of
    ``[gamma, omega]``), ``residuals``, ``growth_rate``, ``growth_rate_error``, ``frequency``,
    ``converged``, ...; ``outcome.fields`` holds the eigenfields."""

    kind = "modes"
    suffix = "-modes"

    def lines(self):
        from kindyn.commands.modes import eigenvalue_table, leading_line

        return eigenvalue_table(self.outcome) + [leading_line(self.summary, self.outcome)]

    def _write(self, path):
        from kindyn.output.modes_file import write_modes_file

        write_modes_file(path, self.case, self.outcome, self.summary, self.cautions, command=self.command)

    def _figure(self, path, style):
        from kindyn.commands.modes import modes_figure_of

        modes_figure_of(path, self.case, self.outcome, self.summary, style)


class FlowResult(Result):
    """What the case's flow is (:func:`kindyn.api.flow_statistics`, ``kindyn flow``): ``u_rms``,
    ``helicity``, ``relative_helicity``, ``U``, ``k_f``, ``Rm``, ``alpha_soca``, ``eta_t_soca``, ...;
    ``velocity`` is the sampled velocity ``(3, nx, ny, nz)``, ``outcome`` the
    :class:`~kindyn.diagnostics.flow_stats.FlowStatistics` (spectra)."""

    kind = "flow"
    suffix = "-flow"

    def __init__(self, case, stats, summary, cautions, command, velocity):
        super().__init__(case, stats, summary, cautions, command)
        self.velocity = velocity

    def lines(self):
        s = self.summary
        return [f"{s['flow_type']} flow ({s['time_dependence']}, t = 0): u_rms = {s['u_rms']:.6g}, "
                f"<u.omega> = {s['helicity']:.6g}, Rm = U/(eta k_f) = {s['Rm']:.6g}"]

    def _write(self, path):
        from kindyn.output.flow_file import write_flow_file

        st = self.outcome
        write_flow_file(path, self.case, self.summary, self.velocity, st.wavenumbers, st.energy_spectrum,
                        st.helicity_spectrum, command=self.command)

    def _figure(self, path, style):
        from kindyn.commands.flow import flow_figure_of

        flow_figure_of(path, self.case, self.outcome, self.summary, style)


class CoefficientsResult(Result):
    """Test-field coefficients (:func:`kindyn.api.coefficients`, ``kindyn testfield``): ``alpha``,
    ``alpha_soca``, ``K``, ``alpha_K``, ``eta_K``, ... as in the JSON object; ``outcome`` is the
    :class:`~kindyn.testfield.calibration.TestFieldResult`."""

    kind = "testfield"
    suffix = "-testfield"

    def lines(self):
        from kindyn.commands.testfield import text_report

        return text_report(self.case, self.outcome)

    def _write(self, path):
        # the same steps as kindyn.commands.testfield.execute (its file and attributes)
        from kindyn.output.testfield_file import ensemble_variables, result_variables, write_testfield_file
        from kindyn.testfield.summary import file_attributes

        result, summary = self.outcome, self.summary
        variables = result_variables(result)
        if result.members:
            variables.update(ensemble_variables([m["tensors"] for m in result.members], result.ensemble["seeds"]))
        write_testfield_file(path, self.case, summary, variables, file_attributes(result, summary, self.cautions),
                             result.K, summary["mean_components"], command=self.command,
                             members=len(result.members) if result.members else None)

    def _figure(self, path, style):
        import dataclasses

        from kindyn.commands.testfield import _figure

        output = dataclasses.replace(self.case.output, figure_format=style.format, figure_dpi=style.dpi,
                                     figure_size=style.size)
        _figure(dataclasses.replace(self.case, output=output), self.outcome, path)


class ClosureResult(Result):
    """The closure across scales (:func:`kindyn.api.closure`, ``kindyn closure``): ``K``,
    ``direct_growth_rate``, ``direct_growth_rate_error``, ``predictions`` (name -> ``growth_rate``,
    ``error``, ``relative_difference``, ``difference_in_errors``, ``holds``), ``local_closure``, ... as
    in the JSON object; ``outcome`` is the :class:`~kindyn.testfield.scales.ScaleComparison`, ``table``
    its arrays (those of the file)."""

    kind = "closure"
    suffix = "-closure"

    def __init__(self, case, comparison, summary, cautions, command, table):
        super().__init__(case, comparison, summary, cautions, command)
        self.table = table

    def lines(self):
        from kindyn.commands.closure import text_report

        return text_report(self.case, self.outcome)

    def _write(self, path):
        from kindyn.commands.closure import file_attributes
        from kindyn.output.closure_file import write_closure_file

        write_closure_file(path, self.case, self.table, file_attributes(self.outcome, self.summary, self.cautions),
                           command=self.command)

    def _figure(self, path, style):
        from kindyn.commands.closure import closure_figure_of

        closure_figure_of(path, self.case, self.outcome, style)


class SweepResult(Result):
    """A sweep (:func:`kindyn.api.parameter_sweep`, ``kindyn sweep``): ``points`` (one dict per point:
    swept values, ``growth_rate``, ``growth_rate_error``, ``status``, ...), ``critical``, ``windows``,
    ``resolution``, ``summary_path`` (the summary file, rewritten after every point) and
    ``figure_path``; ``outcome`` is the :class:`kindyn.sweep.driver.SweepResult`."""

    kind = "sweep"
    suffix = "-sweep"

    def __init__(self, outcome, summary, cautions, command, output, flow_type):
        super().__init__(None, outcome, summary, cautions, command)
        self.output, self.flow_type = output, flow_type

    @property
    def name(self) -> str:
        stem = self.outcome.summary_path.stem
        return stem[: -len("-sweep")] if stem.endswith("-sweep") else stem

    def __repr__(self):
        return f"<kindyn SweepResult {self.name}: {len(self.outcome.rows)} points, {len(self.outcome.critical)} " \
               "sign changes>"

    def lines(self):
        from kindyn.commands.sweep import report_lines

        return report_lines(self.outcome, cautions=False)

    def default_path(self, folder="."):
        return Path(folder) / f"{self.name}-sweep.nc"

    def _write(self, path):
        import shutil

        if Path(path).resolve() != Path(self.outcome.summary_path).resolve():
            shutil.copyfile(self.outcome.summary_path, path)

    def figure(self, path=None, format=None, size=None, dpi=None) -> Path:
        import dataclasses

        from kindyn.commands.sweep import draw_sweep_figure

        changes = {k: v for k, v in (("figure_format", format), ("figure_size", tuple(size) if size else None),
                                     ("figure_dpi", dpi)) if v is not None}
        if path is not None and not format:
            changes["figure_format"] = Path(path).suffix.lstrip(".") or self.output.figure_format
        output = dataclasses.replace(self.output, **changes)
        return draw_sweep_figure(self.outcome, output, self.flow_type, path)
