"""The netCDF record of ``kindyn flow``: the velocity on the grid, its shell spectra, its numbers.

Contents: ``ux, uy, uz`` on ``(x, y, z)`` (periodic coordinates with no endpoint and a ``period``
attribute, so the file is itself a valid ``velocity-file`` flow), the shell wavenumbers with the
energy spectrum ``E_s`` and helicity spectrum ``H_s`` (``sum E_s = <|u|^2>/2``,
``sum H_s = <u . omega>``), and global attributes with every number of the summary (prefixed
``result_``), the cautions, the resolved case (JSON) and its text.

The Rm rule travels with the velocity: the global attributes ``U`` and ``k_f`` are the flow's
declared scales (as used for ``Rm = U/(eta k_f)`` in the case that wrote the file) and
``scale_rule`` says how they were obtained; a ``velocity-file`` flow reads ``U`` and ``k_f`` back
(:mod:`kindyn.flows.velocity_file`), so running from the file keeps eta at the same Rm.
"""

from __future__ import annotations

from kindyn.flows.scales import scale_rule

from kindyn.output.netcdf import provenance_attributes, add_grid, add_variable, atomic_dataset, set_attributes


def write_flow_file(path, case, summary: dict, u, wavenumbers, energy_spectrum, helicity_spectrum,
                    time: float = 0.0, command=None) -> None:
    """Write the flow record atomically; ``u`` is the velocity ``(3, nx, ny, nz)`` at ``time``
    (``command``: what wrote it, default the process's command line)."""
    scalars = {f"result_{k}": v for k, v in summary.items() if not isinstance(v, (dict, list))}
    scalars["cautions"] = "; ".join(summary.get("cautions", [])) or "none"
    with atomic_dataset(path) as ds:
        set_attributes(ds, {
            **provenance_attributes(case, f"kindyn flow diagnostics: {case.name}", command),
            "snapshot_time": float(time),
            **scalars,
            "U": float(case.flow.speed),
            "k_f": float(case.flow.wavenumber),
            "scale_rule": scale_rule(case.flow),
        })
        add_grid(ds, case.box)
        for i, axis in enumerate("xyz"):
            add_variable(ds, f"u{axis}", ("x", "y", "z"), u[i], long_name=f"{axis} component of the velocity "
                         f"at t = {time:g}")
        ds.createDimension("wavenumber", len(wavenumbers))
        add_variable(ds, "wavenumber", ("wavenumber",), wavenumbers,
                     long_name="shell wavenumber k_s = s dk, dk = 2 pi / max(L)")
        add_variable(ds, "energy_spectrum", ("wavenumber",), energy_spectrum,
                     long_name="kinetic energy per shell E_s (sum = <|u|^2>/2)")
        add_variable(ds, "helicity_spectrum", ("wavenumber",), helicity_spectrum,
                     long_name="kinetic helicity per shell H_s (sum = <u . omega>)")
