"""Parameter sweeps: growth rate versus Rm (or any case key), dynamo windows, resolution studies.

``spec`` validates the ``[sweep]`` section; ``points`` expands it into resolved cases identified
by their content; ``methods`` solves one point; ``execution`` runs points in local processes and
``dask_pool`` on a Dask cluster; ``critical`` finds sign changes of gamma and dynamo windows;
``resolution`` compares grids; ``summary`` writes the summary netCDF; ``driver`` ties them
together (:func:`kindyn.sweep.driver.run_sweep`). The command is ``kindyn sweep``.
"""

from kindyn.sweep.spec import SweepSpec, validate_sweep

__all__ = ["SweepSpec", "validate_sweep"]
