"""Leading eigenpairs of a propagator by Krylov methods (Arnoldi; ARPACK).

A Krylov method is applied matrix-free to ``A = exp(L T)`` (a
:class:`~kindyn.eigen.propagator.Propagator`), asking for the eigenvalues of largest modulus. Since
``|mu| = exp(gamma T)``, those are the modes of largest growth rate ``gamma``, oscillatory ones
included (a Krylov method on the propagator never needs the huge, strongly damped part of the
spectrum of ``L`` that makes ``L`` itself unsuitable). Two solvers: the growing Arnoldi iteration of
:mod:`kindyn.eigen.arnoldi` (default; stops as soon as the wanted pairs converge, ARPACK takes over
if its basis limit is reached) and ``scipy.sparse.linalg.eigs`` (ARPACK, implicitly restarted).

From multipliers to eigenvalues
-------------------------------
``p = ln(mu)/T = ln|mu|/T + i arg(mu)/T`` exactly, with ``arg`` the principal angle in
``(-pi, pi]``. ``gamma = ln|mu|/T`` is unambiguous; ``omega`` is only known modulo ``2 pi/T``: the
principal value is right when ``|omega| T < pi``. Two safeguards:

1. ``T`` is short by default (``T = 1/(U k_f)``, one turnover time; :mod:`kindyn.eigen.settings`),
   so the principal branch covers ``|omega| < pi U k_f``, above the frequencies of growing or weakly
   damped modes (bounded by advection rates ``~ U k``; ABC near onset: ``omega ~ 0.6 U k_f``). A
   shorter ``T`` widens the branch but costs more Arnoldi iterations: measured on ABC at Rm = 9.5 to 12
   (16^3), ``T = 1/(U k_f)`` with 40 Arnoldi vectors needed the fewest time steps in total, ``T = 0.5``
   about 1.3x more, ``T = 2`` to ``4`` about 1.5-2x more;
2. for a steady flow every eigenvector ``v`` is also propagated over ``T/2`` (``steps//2`` steps of
   the same size): its Rayleigh quotient ``mu_half = exp(p T/2)`` fixes ``omega`` unambiguously for
   ``|omega| < 2 pi/T``; the branch ``n`` in ``omega = arg(mu)/T + 2 pi n/T`` nearest to
   ``arg(mu_half)/(T/2)`` is taken, and ``n != 0`` is reported (:attr:`EigenSolution.branch_shifts`).
   Beyond ``|omega| = 2 pi/T`` a frequency is aliased without warning: lower ``modes.propagation_time``
   for flows with faster oscillating modes.

For a time-periodic flow (``periodic=True``, ``T`` = the flow period) the frequency of a Floquet
mode is *defined* modulo the flow frequency ``2 pi/T`` and is reported in ``(-pi/T, pi/T]``.

Accuracy: both stop when ``||A v - mu v|| <= tol |mu|``; the eigenvalue error is then about
``tol/T`` for a well-conditioned mode (more for the non-normal operators of fast flows). The residual
``||A v - mu v|| / (|mu| ||v||)`` is recomputed explicitly and reported for every mode. Vector norms
are energy norms (see :mod:`kindyn.eigen.basis`).

Degenerate eigenvalues: a single-vector Krylov method sees one direction of an exactly degenerate
eigenspace (a symmetry of the flow, or ``+-k_z`` of a z-independent flow in a 3-D box); further copies
appear only through round-off. Distinct eigenvalues are reliable, multiplicities are not; the planar
reduction separates ``+-k_z`` exactly.

Dense linear algebra inside the solvers is small; multithreaded BLAS is many times slower here, so the
solve runs with one BLAS thread (as :func:`kindyn.run._estimate` does).
"""

from __future__ import annotations

import math
import time as wallclock
from dataclasses import dataclass

import numpy as np
import scipy.sparse.linalg
from threadpoolctl import threadpool_limits

from kindyn.eigen.arnoldi import growing_arnoldi
from kindyn.errors import NumericalError

DEFAULT_KRYLOV_DIMENSION = 40  # ARPACK's ncv
DEFAULT_MAX_BASIS = 120  # largest basis of the growing Arnoldi iteration
BASIS_MEMORY_BYTES = 512 * 2**20
SOLVERS = ("arnoldi", "arpack")


@dataclass(frozen=True)
class EigenSolution:
    """Leading eigenpairs of one propagator, sorted by growth rate (largest first).

    ``eigenvalues`` are ``p = gamma + i omega`` (complex array ``(count,)``), ``multipliers`` the
    propagator eigenvalues ``mu = exp(p T)``, ``vectors`` the unit-norm eigenvectors as columns
    ``(size, count)`` (complex), ``residuals`` ``||A v - mu v||/|mu|``.
    """

    eigenvalues: np.ndarray
    multipliers: np.ndarray
    residuals: np.ndarray
    vectors: np.ndarray
    branch_shifts: np.ndarray
    propagation_time: float
    time_step: float
    periodic: bool
    applications: int
    wall_seconds: float

    @property
    def frequency_modulus(self) -> float | None:
        """``2 pi/T`` when the frequency is only defined modulo it (periodic flows), else None."""
        return 2 * math.pi / self.propagation_time if self.periodic else None


def eigenvalues_from_multipliers(mu, T: float) -> np.ndarray:
    """``p = ln(mu)/T`` on the principal branch: ``gamma = ln|mu|/T``, ``omega = arg(mu)/T in (-pi/T, pi/T]``."""
    mu = np.asarray(mu, complex)
    with np.errstate(divide="ignore"):
        return (np.log(np.abs(mu)) + 1j * np.angle(mu)) / T


def resolve_branch(p: complex, mu_half: complex, T: float, T_half: float) -> tuple[complex, int]:
    """Shift ``Im p`` by ``2 pi n/T`` to agree with ``arg(mu_half)/T_half`` (see module doc)."""
    omega_half = np.angle(mu_half) / T_half
    n = int(round((omega_half - p.imag) * T / (2 * math.pi)))
    return complex(p.real, p.imag + 2 * math.pi * n / T), n


def _normalise(v: np.ndarray) -> np.ndarray:
    v = v / np.linalg.norm(v)
    j = int(np.argmax(np.abs(v)))
    return v * (abs(v[j]) / v[j])  # largest entry real and positive


def leading_eigenpairs(propagator, count: int, tolerance: float = 1e-10, krylov_dimension: int | None = None,
                       max_restarts: int = 1000, seed: int = 1, periodic: bool = False,
                       solver: str = "arnoldi") -> EigenSolution:
    """The ``count`` eigenpairs of ``propagator`` with the largest ``|mu|`` (largest ``gamma``).

    ``solver="arnoldi"`` (default): the growing Arnoldi iteration of :mod:`kindyn.eigen.arnoldi`, which
    stops as soon as the wanted pairs converge, with a basis of at most ``krylov_dimension`` vectors
    (default 120, fewer if the basis would exceed :data:`BASIS_MEMORY_BYTES`); if that is not enough,
    ARPACK continues from the best Ritz vector. ``solver="arpack"``: ARPACK from the start, with
    ``ncv = krylov_dimension`` (default ``max(2 count + 3, 40)``). The start vector is seeded. Raises
    :class:`~kindyn.errors.NumericalError` when ARPACK does not converge (the message says what to
    enlarge).
    """
    n = propagator.size
    want = min(count + 1, n - 2)  # one spare, so that a conjugate pair is not split at the end of the list
    if want < 1:
        raise NumericalError(f"the problem has only {n} unknowns; use a larger grid for {count} modes")
    if solver not in SOLVERS:
        raise ValueError(f"unknown eigen-solver {solver!r}; expected one of {SOLVERS}")
    rng = np.random.default_rng(seed)
    v0 = rng.standard_normal(n)
    if propagator.dtype != np.float64:
        v0 = v0 + 1j * rng.standard_normal(n)
    started, before = wallclock.time(), propagator.applications
    T = propagator.time
    with threadpool_limits(limits=1, user_api="blas"):
        mu = None
        if solver == "arnoldi":
            itemsize = np.dtype(propagator.dtype).itemsize
            largest = max(want + 2, min(krylov_dimension or DEFAULT_MAX_BASIS, BASIS_MEMORY_BYTES // (n * itemsize)))
            ritz = growing_arnoldi(propagator.apply, v0, want, tolerance, largest)
            if ritz.converged:
                mu, V = ritz.values, ritz.vectors
            else:  # restart with ARPACK from the best Ritz vector
                x = ritz.vectors[:, 0]
                v0 = (x.real + x.imag) if propagator.dtype == np.float64 else x
                krylov_dimension = None
        if mu is None:
            mu, V = _arpack(propagator, want, v0, tolerance, krylov_dimension, max_restarts, before)
        p = eigenvalues_from_multipliers(mu, T)
        order = np.lexsort((-p.imag, -np.round(p.real, 12)))[:count]
        mu, p, V = mu[order], p[order], V[:, order]
        vectors = np.empty((n, len(order)), complex)
        residuals = np.empty(len(order))
        shifts = np.zeros(len(order), int)
        half = propagator.steps // 2
        for j in range(len(order)):
            v = _normalise(V[:, j])
            vectors[:, j] = v
            residuals[j] = _residual(propagator, v, mu[j])
            if not periodic and half >= 1 and propagator.steps >= 2:
                w = _apply_complex(propagator, v, steps=half)
                p[j], shifts[j] = resolve_branch(p[j], np.vdot(v, w), T, half * propagator.dt)
    if not np.all(np.isfinite(p.real)):
        raise NumericalError("a propagator eigenvalue is zero or not finite; reduce modes.propagation_time")
    return EigenSolution(p, mu, residuals, vectors, shifts, T, propagator.dt, periodic,
                         propagator.applications - before, wallclock.time() - started)


def _arpack(propagator, want, v0, tolerance, krylov_dimension, max_restarts, before):
    n, T = propagator.size, propagator.time
    ncv = min(n, krylov_dimension or max(2 * want + 1, DEFAULT_KRYLOV_DIMENSION))
    try:
        return scipy.sparse.linalg.eigs(propagator.linear_operator(), k=want, which="LM", v0=v0, ncv=ncv,
                                        tol=tolerance, maxiter=max_restarts)
    except scipy.sparse.linalg.ArpackNoConvergence as exc:
        found = len(exc.eigenvalues)
        raise NumericalError(
            f"ARPACK found only {found} of {want} eigenvalues after {max_restarts} restarts "
            f"({propagator.applications - before} propagations over T = {T:.4g}); raise modes.krylov_dimension, "
            f"modes.max_restarts or modes.propagation_time, or loosen modes.tolerance") from None


def _apply_complex(propagator, v: np.ndarray, steps: int | None = None) -> np.ndarray:
    """``A v`` for a complex ``v`` (a real propagator is applied to the real and imaginary parts)."""
    if propagator.dtype == np.float64:
        return propagator.apply(v.real, steps) + 1j * propagator.apply(v.imag, steps)
    return propagator.apply(v, steps)


def _residual(propagator, v: np.ndarray, mu: complex) -> float:
    return float(np.linalg.norm(_apply_complex(propagator, v) - mu * v) / (abs(mu) * np.linalg.norm(v)))
