"""The ``[modes]`` case section: keys of the eigen-solver (``kindyn modes``, eigen-based sweeps).

Registered in :data:`kindyn.case.sections.SECTIONS`; every key has a default, so a case without a
``[modes]`` section can be solved as it is.
"""

from __future__ import annotations

from kindyn.case import schema
from kindyn.case.schema import Key

METHODS = ("auto", "box", "planar")


def _planar_grid(value) -> tuple[int, int]:
    nx, ny = _two_counts(value)
    if min(nx, ny) < 4:
        raise ValueError("a list of two whole numbers [nx, ny], each >= 4")
    return nx, ny


_two_counts = schema.list_of(schema.positive_integer, "whole numbers [nx, ny], each >= 4", length=2)
_wavenumber_list = schema.list_of(schema.non_negative, "vertical wavenumbers >= 0 (numbers or multiples of pi)")


def _non_negative_integer(value) -> int:
    v = schema.integer(value)
    if v < 0:
        raise ValueError("a whole number >= 0")
    return v


MODES = {
    "count": Key(schema.positive_integer, 4, "number of leading eigenvalues (largest growth rates) to find"),
    "method": Key(schema.choice(*METHODS), "auto",
                  "box: solve on the 3-D grid; planar: B = b(x, y) exp(i kz z) on a 2-D grid (z-independent "
                  "flows only); auto: planar when the flow does not depend on z, else box"),
    "kz": Key(_wavenumber_list, None,
              "vertical wavenumbers of the planar reduction (default: those the 3-D box holds, "
              "2*pi*m/Lz for the kept m >= 0; -kz gives the complex-conjugate eigenvalues)"),
    "planar_grid": Key(_planar_grid, None, "grid [nx, ny] of the planar reduction (default: the domain's nx, ny)"),
    "cfl": Key(schema.positive, 1.0,
               "time step = cfl / sum_i(max|u_i| k_max,i); the eigenvalues carry an O(dt^4) error (RK4)"),
    "time_step": Key(schema.positive, None, "fixed time step; overrides cfl (for periodic flows: the largest step)"),
    "propagation_time": Key(schema.positive, None,
                            "T of the propagator exp(L T) for steady flows (default 1/(U k_f), rounded to an "
                            "even number of steps); periodic flows always use their period"),
    "tolerance": Key(schema.positive, 1e-10,
                     "ARPACK tolerance: ||A v - mu v|| <= tolerance |mu| (eigenvalue error about tolerance/T)"),
    "solver": Key(schema.choice("arnoldi", "arpack"), "arnoldi",
                  "arnoldi: basis grown one propagation at a time, stops when converged (ARPACK takes over at "
                  "krylov_dimension); arpack: implicitly restarted Arnoldi (scipy.sparse.linalg.eigs) throughout"),
    "krylov_dimension": Key(schema.positive_integer, None,
                            "largest Arnoldi basis (default 120, capped at 512 MB) for solver = arnoldi; "
                            "ARPACK's ncv (default max(2 count + 3, 40)) for solver = arpack"),
    "max_restarts": Key(schema.positive_integer, 1000, "ARPACK restarts before giving up"),
    "seed": Key(schema.integer, 1, "seed of the random start vector"),
    "fields": Key(_non_negative_integer, None, "number of eigenfields written to netCDF (default: count)"),
}
