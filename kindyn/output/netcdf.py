"""netCDF writing and reading: plain data in, CF-1.8 names, units and long_name attributes.

Files are written to a temporary created exclusively in the same folder (a new random name, no
link followed) and renamed when complete, so a killed process never leaves an unreadable file
under the final name and nothing outside the folder is written (:mod:`kindyn.output.atomic`).
Periodic coordinates have no endpoint; ``time`` holds simulation time. Complex data is stored as real and imaginary parts.
netCDF attributes take no None, dicts or numpy booleans: :func:`attribute_value` converts.

What keeps every file CF-clean (checked by ``tests/test_cf_files.py`` with ``cfchecker``):

* every variable has ``units`` and ``long_name``; kindyn's quantities have no CF standard names,
  so none is written (a wrong one is worse than none);
* simulation time is dimensionless (in the case's units: box lengths and flow speeds), so it has
  ``units = "1"`` and neither ``standard_name = "time"`` nor ``axis = "T"``, which CF reserves for
  times with a unit of time and a reference date (:func:`add_time`);
* text variables are classic character arrays with a length dimension and ``_Encoding = "utf-8"``
  (:func:`add_strings`: netCDF4 and xarray read them back as strings; CF checkers reject
  variable-length strings); flags are numbers with ``flag_values`` and ``flag_meanings``
  (:func:`add_flag`);
* labelled dimensions (tensor components) get an integer index coordinate and a string label
  coordinate named in the ``coordinates`` attribute of the variables that use them
  (:func:`add_labelled_dimension`);
* every file carries the same provenance (:func:`provenance_attributes`): kindyn version, the
  command that wrote it (also in ``history``), the case file, its text, the ``--set`` overrides and
  the resolved case.
"""

from __future__ import annotations

import contextlib
import datetime
import errno
import json
import os
import shlex
import sys
from pathlib import Path

import netCDF4
import numpy as np

from kindyn.output.atomic import atomic_path

CONVENTIONS = "CF-1.8"


def attribute_value(value):
    """A value netCDF accepts as an attribute (None -> "", bool -> 0/1 int, dict -> JSON text)."""
    if value is None:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return np.int8(1 if value else 0)
    if isinstance(value, (dict, list, tuple)):
        return json.dumps(value, default=str)
    if isinstance(value, (int, float, str, np.integer, np.floating)):
        return value
    if isinstance(value, np.ndarray) and value.dtype.kind in "iuf":  # numeric vector attributes (flag_values)
        return value
    return str(value)


@contextlib.contextmanager
def atomic_dataset(path):
    """A new netCDF4 dataset for ``path``, renamed to ``path`` only if the block succeeds and the
    file closes cleanly. It is written on a temporary created exclusively beside ``path`` (a new
    random name, never an existing file or a link: :func:`kindyn.output.atomic.atomic_path`); on any
    failure (in the block, or netCDF's "HDF error" on a full disk when writing or closing) the
    temporary is removed and an :class:`OSError` naming ``path`` is raised (other errors unchanged)."""
    with atomic_path(path) as partial:
        try:
            ds = netCDF4.Dataset(partial, "w", format="NETCDF4", clobber=True)
        except RuntimeError as exc:
            raise _netcdf_failure(exc) from None
        try:
            yield ds
        except BaseException as exc:
            with contextlib.suppress(Exception):
                ds.close()
            if isinstance(exc, RuntimeError) and str(exc).startswith("NetCDF"):
                raise _netcdf_failure(exc) from None
            raise
        try:
            ds.close()
        except RuntimeError as exc:
            raise _netcdf_failure(exc) from None


def _netcdf_failure(exc: RuntimeError) -> OSError:
    """netCDF's own write errors ("NetCDF: HDF error" on a full disk) as an OSError."""
    return OSError(errno.EIO, str(exc))


def set_attributes(target, attributes: dict) -> None:
    for key, value in attributes.items():
        target.setncattr(key, attribute_value(value))


COMMAND_VARIABLE = "KINDYN_COMMAND"  # set by a command for the processes it starts (sweep points)


def command_line(argv=None) -> str:
    """The command that is writing a file: ``$KINDYN_COMMAND`` when a kindyn command has set it for
    its own and its worker processes, else from ``sys.argv`` (``kindyn run case.toml --out o`` or
    ``python script.py ...``)."""
    if argv is None and os.environ.get(COMMAND_VARIABLE):
        return os.environ[COMMAND_VARIABLE]
    argv = list(sys.argv if argv is None else argv)
    if not argv or not argv[0]:
        return "python (no command line)"
    program = Path(argv[0])
    if program.name == "kindyn" or (program.name == "__main__.py" and program.parent.name == "kindyn"):
        return " ".join(["kindyn", *map(shlex.quote, argv[1:])])
    return " ".join(["python", *map(shlex.quote, argv)])


def provenance(title: str, command: str | None, case_file: str, case_text: str, overrides, resolved: dict,
               flow_type: str) -> dict:
    """The global attributes every kindyn file carries (see the module docstring)."""
    from kindyn._version import __version__

    command = command or command_line()
    stamp = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    return {
        "Conventions": CONVENTIONS,
        "title": title,
        "source": f"kindyn {__version__}",
        "history": f"{stamp}: {command}",
        "kindyn_version": __version__,
        "kindyn_command": command,
        "case_file": case_file,
        "case_text": case_text,
        "case_overrides": list(overrides),
        "case_resolved": json.dumps(resolved, sort_keys=True),
        "flow_type": flow_type,
    }


def provenance_attributes(case, title: str, command: str | None = None) -> dict:
    """Global attributes every kindyn file carries: conventions, title, version, command and the case."""
    return provenance(title, command, case.path, case.text, case.overrides, case.resolved, case.flow_type)


def add_variable(ds, name, dims, data, units="1", long_name="", standard_name=None, dtype="f8", **extra):
    var = ds.createVariable(name, dtype, dims, zlib=True, complevel=1)
    var[...] = data
    attrs = {"units": units, "long_name": long_name, **extra}
    if standard_name:
        attrs["standard_name"] = standard_name
    set_attributes(var, attrs)
    return var


def add_grid(ds, box) -> None:
    """Dimensions and coordinate variables ``x, y, z`` (cell starts, no endpoint)."""
    for i, axis in enumerate("xyz"):
        ds.createDimension(axis, box.grid[i])
        add_variable(ds, axis, (axis,), box.axis(i), units="1", long_name=f"{axis} coordinate (periodic, no endpoint)",
                     axis=axis.upper(), period=box.lengths[i])


TIME_UNITS_NOTE = ("dimensionless: in the units of the case (box lengths, flow speeds), e.g. 1/(U k_f) when "
                   "U = k_f = 1")


def add_time(ds, name, dim, values, long_name="simulation time", **extra):
    """A dimensionless simulation-time variable (``units = "1"``, no ``standard_name``/``axis``: see
    the module docstring)."""
    return add_variable(ds, name, (dim,), values, units="1", long_name=long_name, comment=TIME_UNITS_NOTE, **extra)


def add_index(ds, dim, size, long_name, **extra):
    """Dimension ``dim`` with an integer index coordinate variable ``0 .. size-1``."""
    if dim not in ds.dimensions:
        ds.createDimension(dim, size)
    return add_variable(ds, dim, (dim,), np.arange(size), dtype="i4", long_name=long_name, **extra)


def add_flag(ds, name, dims, values, long_name, meanings=("false", "true"), **extra):
    """A 0/1 (or 0..n-1) flag variable: bytes with numeric ``flag_values`` and ``flag_meanings``."""
    return add_variable(ds, name, dims, np.asarray(values, np.int8), dtype="i1", long_name=long_name,
                        flag_values=np.arange(len(meanings), dtype=np.int8), flag_meanings=" ".join(meanings),
                        **extra)


def add_strings(ds, name, dims, values, long_name, **extra):
    """Text values on ``dims`` as a character array with a length dimension ``<name>_length`` and
    ``_Encoding = "utf-8"`` (read back as strings by netCDF4 and xarray)."""
    texts = np.asarray(["" if v is None else str(v) for v in np.ravel(np.asarray(values, object))], dtype=object)
    width = max([1, *(len(t.encode("utf-8")) for t in texts)])
    length = f"{name}_length"
    ds.createDimension(length, width)
    var = ds.createVariable(name, "S1", (*dims, length))
    var._Encoding = "utf-8"
    shape = tuple(len(ds.dimensions[d]) for d in dims)
    encoded = np.array([t.encode("utf-8").ljust(width, b"\0") for t in texts], dtype=f"S{width}").reshape(shape)
    var.set_auto_chartostring(False)
    var[...] = encoded.view("S1").reshape(*shape, width)
    var.set_auto_chartostring(True)
    set_attributes(var, {"units": "1", "long_name": long_name, **extra})
    return var


COMPONENTS = ("x", "y", "z")


def add_labelled_dimension(ds, dim, labels, long_name) -> str:
    """Dimension ``dim`` with an integer index coordinate and a label coordinate ``<dim>_label``
    (strings such as x, y, z); returns the label name for the ``coordinates`` attribute."""
    add_index(ds, dim, len(labels), f"{long_name} (index)")
    label = f"{dim}_label"
    add_strings(ds, label, (dim,), list(labels), f"{long_name} (label)")
    return label


def read_dataset(path) -> dict:
    """Every variable (as numpy arrays) and global attribute of a netCDF file, as a dict."""
    with netCDF4.Dataset(path) as ds:
        data = {name: np.asarray(var[...]) for name, var in ds.variables.items()}
        data["attributes"] = {key: ds.getncattr(key) for key in ds.ncattrs()}
    return data
