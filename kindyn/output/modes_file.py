"""The netCDF record of an eigen-solve (``kindyn modes``).

Contents
--------
* per mode (dimension ``mode``, largest growth rate first): ``growth_rate`` (gamma),
  ``frequency`` (omega), ``residual`` (``||A v - mu v||/|mu|``), the propagator eigenvalue
  ``multiplier_real``/``multiplier_imag`` (``mu = exp(p T)``), ``branch_shift`` and, for the planar
  reduction, ``vertical_wavenumber`` (k_z);
* eigenfields in physical space (dimension ``field``, the first modes), real and imaginary parts as
  separate variables ``eigenfield_{x,y,z}_{real,imag}`` (complex data is not portable in netCDF):

  - box method: on ``(x, y, z)``; the mode is ``B(x, t) = Re[(B_real + i B_imag) exp(p t)]``;
  - planar method: the amplitude ``b`` on ``(x, y)``; the mode is
    ``B(x, y, z, t) = Re[(b_real + i b_imag) exp(i k_z z + p t)]`` with ``field_vertical_wavenumber``;

  normalised to unit energy ``<|B_real|^2 + |B_imag|^2>/2`` (box) or ``<|b|^2>`` (planar), largest
  coefficient real;
* global attributes: method, flow kind, time step, propagation time, frequency modulus (periodic
  flows), resolution check, cautions, the resolved case (JSON) and its text.

Coordinates have no endpoint; attributes are converted by :func:`kindyn.output.netcdf.attribute_value`.
"""

from __future__ import annotations


import numpy as np

from kindyn.output.netcdf import add_grid, add_index, add_variable, atomic_dataset, provenance_attributes, set_attributes


def write_modes_file(path, case, outcome, summary: dict, cautions: list[str], command=None) -> None:
    """Write the eigen-solve ``outcome`` (a :class:`kindyn.eigen.solve.ModesOutcome`) atomically
    (``command``: what wrote it, default the process's command line)."""
    modes = outcome.modes
    with atomic_dataset(path) as ds:
        set_attributes(ds, {
            **provenance_attributes(case, f"kindyn eigenmodes: {case.name}", command),
            "method": outcome.method,
            "flow_kind": "time-periodic (Floquet multipliers of the period map)" if outcome.periodic else "steady",
            "frequency_modulus": outcome.frequency_modulus if outcome.frequency_modulus else "",
            "frequency_note": ("omega is defined modulo 2 pi / period and given in (-pi/T, pi/T]" if outcome.periodic
                               else "omega from ln(mu)/T, branch checked with a second propagation over T/2"),
            "time_step": outcome.time_step,
            "propagation_time": outcome.propagation_time,
            "z_independent": bool(outcome.z_independent),
            "uniform_field_mode": "excluded: the k = 0 mode is neutral; eigenfields have zero mean",
            "caution": " ".join(cautions),
            **{f"result_{k}": v for k, v in summary.items() if not isinstance(v, (list, dict))},
        })
        add_index(ds, "mode", len(modes), "mode index (largest growth rate first)")
        add_variable(ds, "growth_rate", ("mode",), [m.growth_rate for m in modes],
                     long_name="growth rate gamma = Re p of the field amplitude")
        add_variable(ds, "frequency", ("mode",), [m.frequency for m in modes],
                     long_name="angular frequency omega = Im p")
        add_variable(ds, "residual", ("mode",), [m.residual for m in modes],
                     long_name="relative residual ||A v - mu v|| / |mu| of the propagator eigenpair")
        add_variable(ds, "multiplier_real", ("mode",), [m.multiplier.real for m in modes],
                     long_name="real part of the propagator eigenvalue mu = exp(p T)")
        add_variable(ds, "multiplier_imag", ("mode",), [m.multiplier.imag for m in modes],
                     long_name="imaginary part of the propagator eigenvalue mu = exp(p T)")
        add_variable(ds, "branch_shift", ("mode",), [m.branch_shift for m in modes], dtype="i4",
                     long_name="n in omega = arg(mu)/T + 2 pi n/T")
        if outcome.method == "planar":
            add_variable(ds, "vertical_wavenumber", ("mode",), [m.kz for m in modes],
                         long_name="vertical wavenumber k_z")
        fields = outcome.fields
        if not fields:
            return
        add_index(ds, "field", len(fields), "eigenfield index (the eigenfield of mode number field)")
        if outcome.method == "box":
            add_grid(ds, case.box)
            dims = ("field", "x", "y", "z")
            where = "B(x, t) = Re[(B_real + i B_imag) exp(p t)]"
        else:
            _add_plane(ds, case.box.lengths[:2], outcome.planar_grid)
            dims = ("field", "x", "y")
            add_variable(ds, "field_vertical_wavenumber", ("field",), [modes[j].kz for j in range(len(fields))],
                         long_name="vertical wavenumber k_z of each planar eigenfield")
            where = "B(x, y, z, t) = Re[(b_real + i b_imag) exp(i k_z z + p t)]"
        for part, index in (("real", 0), ("imag", 1)):
            data = np.stack([f[index] for f in fields])
            for c, axis in enumerate("xyz"):
                add_variable(ds, f"eigenfield_{axis}_{part}", dims, data[:, c],
                             long_name=f"{part} part of the {axis} component of the eigenfield; {where}")


def _add_plane(ds, lengths, grid) -> None:
    for i, axis in enumerate("xy"):
        ds.createDimension(axis, grid[i])
        add_variable(ds, axis, (axis,), np.arange(grid[i]) * (lengths[i] / grid[i]),
                     long_name=f"{axis} coordinate (periodic, no endpoint)", axis=axis.upper(), period=lengths[i])
