"""netCDF writing and reading: plain data in, CF-style names, units and long_name attributes.

Files are written to a temporary name in the same folder and renamed when complete, so a killed
process never leaves an unreadable file under the final name. Periodic coordinates have no
endpoint; ``time`` holds simulation time. Complex data is stored as real and imaginary parts.
netCDF attributes take no None, dicts or numpy booleans: :func:`attribute_value` converts.
"""

from __future__ import annotations

import contextlib
import json
import os
from pathlib import Path

import netCDF4
import numpy as np

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
    return str(value)


@contextlib.contextmanager
def atomic_dataset(path):
    """Open ``path + ".part"`` for writing; rename to ``path`` only if the block succeeds."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    partial = path.with_name(path.name + ".part")
    ds = netCDF4.Dataset(partial, "w", format="NETCDF4")
    try:
        yield ds
    except BaseException:
        ds.close()
        partial.unlink(missing_ok=True)
        raise
    ds.close()
    os.replace(partial, path)


def set_attributes(target, attributes: dict) -> None:
    for key, value in attributes.items():
        target.setncattr(key, attribute_value(value))


def provenance_attributes(case, title: str) -> dict:
    """Global attributes every kindyn file carries: conventions, title, version and the case."""
    from kindyn._version import __version__

    return {
        "Conventions": CONVENTIONS,
        "title": title,
        "source": f"kindyn {__version__}",
        "kindyn_version": __version__,
        "case_file": case.path,
        "case_text": case.text,
        "case_overrides": list(case.overrides),
        "case_resolved": json.dumps(case.resolved, sort_keys=True),
        "flow_type": case.flow_type,
    }


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


def read_dataset(path) -> dict:
    """Every variable (as numpy arrays) and global attribute of a netCDF file, as a dict."""
    with netCDF4.Dataset(path) as ds:
        data = {name: np.asarray(var[...]) for name, var in ds.variables.items()}
        data["attributes"] = {key: ds.getncattr(key) for key in ds.ncattrs()}
    return data
