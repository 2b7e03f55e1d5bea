"""A growing Arnoldi iteration that stops as soon as the wanted Ritz pairs have converged.

For an operator ``A`` (here a propagator, each application costing many time steps) the Krylov
space ``K_m = span{v, A v, .., A^{m-1} v}`` is built one application at a time, with an orthonormal
basis ``V_m`` (classical Gram–Schmidt applied twice, which keeps ``V_m`` orthonormal to round-off)
and the Hessenberg matrix ``H_m = V_m^* A V_m``::

    A V_m = V_m H_m + beta_m v_{m+1} e_m^T

A Ritz pair ``(theta, x = V_m y)`` with ``H_m y = theta y``, ``|y| = 1`` has the residual
``|A x - theta x| = beta_m |e_m^T y|`` exactly, so convergence is checked after every application
for the price of a small dense eigen-solve of ``H_m`` (one BLAS thread; see :mod:`kindyn.eigen.krylov`).
The wanted pairs are the ``count`` of largest ``|theta|``; the iteration stops when all of them
satisfy ``|A x - theta x| <= tol |theta|`` (the stopping rule of ARPACK), or when the basis reaches
``max_dimension`` (the caller then restarts, e.g. with ARPACK).

Compared with the implicitly restarted Arnoldi method of ARPACK, which checks convergence only at
the end of each cycle of ``ncv`` applications, this spends no applications past convergence: on the
ABC flow near onset it needed 40-45 applications where ARPACK needed 41-79 depending on ``ncv``. The
price is memory: ``max_dimension + 1`` vectors.

A real operator keeps a real basis and a real ``H``; its Ritz values come in conjugate pairs and
the Ritz vectors are complex.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg


@dataclass(frozen=True)
class RitzPairs:
    """``values (k,)`` and unit ``vectors (n, k)`` (complex), estimated relative residuals, basis size."""

    values: np.ndarray
    vectors: np.ndarray
    residual_estimates: np.ndarray
    converged: bool
    dimension: int


def growing_arnoldi(apply, v0: np.ndarray, count: int, tolerance: float, max_dimension: int) -> RitzPairs:
    """Arnoldi on ``apply`` from ``v0`` until the ``count`` largest-modulus Ritz pairs converge.

    ``apply(v) -> A v`` (new array, same dtype as ``v0``). Returns the ``count`` pairs of largest
    ``|theta|`` (both members of a conjugate pair at the boundary are kept, so possibly one more).
    """
    n = v0.size
    dtype = np.result_type(v0.dtype, np.float64)
    m_max = int(min(max_dimension, n))
    V = np.empty((m_max + 1, n), dtype)  # basis vectors as rows (contiguous)
    H = np.zeros((m_max + 1, m_max), dtype)
    V[0] = v0 / np.linalg.norm(v0)
    for j in range(m_max):
        w = np.asarray(apply(V[j]), dtype)
        basis = V[: j + 1]
        h = basis.conj() @ w
        w = w - h @ basis
        correction = basis.conj() @ w  # second pass: orthogonal to round-off
        w -= correction @ basis
        h += correction
        beta = float(np.linalg.norm(w))
        H[: j + 1, j] = h
        H[j + 1, j] = beta
        m = j + 1
        if m >= min(count + 1, m_max) or beta == 0.0:
            best = _ritz(H[:m, :m], beta, count)
            invariant = beta <= 1e-14 * max(1.0, float(np.max(np.abs(best[0]))))
            if invariant or np.all(best[2] <= tolerance):
                return _pairs(V[:m], best, True, m)
        if beta == 0.0:
            break
        V[j + 1] = w / beta
    best = _ritz(H[:m_max, :m_max], float(abs(H[m_max, m_max - 1])), count)
    return _pairs(V[:m_max], best, False, m_max)


def _ritz(Hm: np.ndarray, beta: float, count: int):
    theta, Y = scipy.linalg.eig(Hm, check_finite=False)
    order = np.argsort(-np.abs(theta), kind="stable")
    keep = min(count, theta.size)
    if keep < theta.size:  # keep the conjugate partner of the last wanted value
        last, following, scale = theta[order[keep - 1]], theta[order[keep]], abs(theta[order[0]])
        if last.imag != 0 and abs(following - np.conj(last)) <= 1e-10 * scale:
            keep += 1
    idx = order[:keep]
    Y = Y[:, idx] / np.linalg.norm(Y[:, idx], axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        estimates = beta * np.abs(Y[-1, :]) / np.abs(theta[idx])
    return theta[idx], Y, np.nan_to_num(estimates, nan=np.inf)


def _pairs(basis_rows: np.ndarray, ritz, converged: bool, m: int) -> RitzPairs:
    theta, Y, estimates = ritz
    vectors = basis_rows.T @ Y
    return RitzPairs(theta, vectors / np.linalg.norm(vectors, axis=0), estimates, converged, m)
