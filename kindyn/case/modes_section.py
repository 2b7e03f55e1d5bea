"""The ``[modes]`` case section: keys of the eigen-solver (``kindyn modes``, eigen-based sweeps).

Every key has a default, so a case without a ``[modes]`` section can be solved as it is. The
solver (:mod:`kindyn.eigen.solve`) reads the validated :class:`ModesConfig` as ``case.modes``.
"""

from __future__ import annotations

from dataclasses import dataclass

from kindyn.case import schema
from kindyn.case.schema import SectionConfig, setting

METHODS = ("auto", "box", "planar")


def _planar_grid(value) -> tuple[int, int]:
    nx, ny = _two_counts(value)
    if min(nx, ny) < 4:
        raise ValueError("a list of two whole numbers [nx, ny], each >= 4")
    return nx, ny  # (its memory is checked by the loader, kindyn.case.budget)


_two_counts = schema.list_of(schema.positive_integer, "whole numbers [nx, ny], each >= 4", length=2)
_wavenumber_list = schema.list_of(schema.non_negative, "vertical wavenumbers >= 0 (numbers or multiples of pi)")


# A Krylov solve finds a few leading eigenvalues; its basis holds at least count + 3 vectors, each
# as large as the field, and costs one propagation per vector (the loader also keeps count below the
# number of unknowns of the grid).
MAX_COUNT = 1000
MAX_KRYLOV_DIMENSION = 10_000
MAX_RESTARTS = 1_000_000


@dataclass(frozen=True, kw_only=True)
class ModesConfig(SectionConfig):
    """``[modes]``: what the eigen-solver computes and how."""

    count: int = setting(schema.bounded_integer(1, MAX_COUNT), 4,
                         "number of leading eigenvalues (largest growth rates) to find")
    method: str = setting(
        schema.choice(*METHODS), "auto",
        "box: solve on the 3-D grid; planar: B = b(x, y) exp(i kz z) on a 2-D grid (z-independent "
        "flows only); auto: planar when the flow does not depend on z, else box")
    kz: tuple[float, ...] | None = setting(
        _wavenumber_list, None,
        "vertical wavenumbers of the planar reduction (default: those the 3-D box holds, "
        "2*pi*m/Lz for the kept m >= 0; -kz gives the complex-conjugate eigenvalues)")
    planar_grid: tuple[int, int] | None = setting(
        _planar_grid, None, "grid [nx, ny] of the planar reduction (default: the domain's nx, ny)")
    cfl: float = setting(
        schema.positive, 1.0,
        "time step = cfl / sum_i(max|u_i| k_max,i); the eigenvalues carry an O(dt^4) error (RK4)")
    time_step: float | None = setting(
        schema.positive, None, "fixed time step; overrides cfl (for periodic flows: the largest step)")
    propagation_time: float | None = setting(
        schema.positive, None,
        "T of the propagator exp(L T) for steady flows (default 1/(U k_f), rounded to an "
        "even number of steps); periodic flows always use their period")
    tolerance: float = setting(
        schema.fraction_below(1e-2, "a relative residual"), 1e-10,
        "ARPACK tolerance: ||A v - mu v|| <= tolerance |mu| (eigenvalue error about tolerance/T)")
    solver: str = setting(
        schema.choice("arnoldi", "arpack"), "arnoldi",
        "arnoldi: basis grown one propagation at a time, stops when converged (ARPACK takes over at "
        "krylov_dimension); arpack: implicitly restarted Arnoldi (scipy.sparse.linalg.eigs) throughout")
    krylov_dimension: int | None = setting(
        schema.bounded_integer(1, MAX_KRYLOV_DIMENSION), None,
        "largest Arnoldi basis (default 120, capped at 512 MB) for solver = arnoldi; "
        "ARPACK's ncv (default max(2 count + 3, 40)) for solver = arpack")
    max_restarts: int = setting(schema.bounded_integer(1, MAX_RESTARTS), 1000, "ARPACK restarts before giving up")
    seed: int = setting(schema.seed, 1, "seed of the random start vector")
    fields: int | None = setting(schema.bounded_integer(0, MAX_COUNT), None,
                                 "number of eigenfields written to netCDF (default: count)")



MODES = ModesConfig.key_table()  # key -> Key, derived from the fields
