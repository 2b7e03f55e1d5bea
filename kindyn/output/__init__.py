"""Output: netCDF files (atomic writes, CF attributes), checkpoints and figures, from plain data.

netCDF4 only in ``output/netcdf*.py`` and ``output/*_file.py``; matplotlib only in
``output/figures*.py`` (on an Agg canvas of their own, never through pyplot). Nothing here imports
the solver (run, eigen, testfield, sweep, assemble, induction, layout, stepping).
"""
