"""Direct steady solutions of the test problems of a steady flow (no time stepping).

With ``S = P curl(u x B_T)``, ``N b = P curl(u x b)`` and ``D = eta |k|^2`` (see
:mod:`kindyn.testfield.problems`) the steady test problems are::

    SOCA:   D b = S                  ->  b = S / (eta |k|^2)         (spectral division, exact)
    full:   (D - N) b = S            <=> (I - D^-1 N) b = D^-1 S     (GMRES, matrix-free)

The full problem is solved by restarted GMRES (scipy.sparse.linalg) with the diffusion as a left
preconditioner. The steady solution is the long-time limit of the test problem only **below
dynamo onset** of the homogeneous problem ``db/dt = N b - D b`` on fluctuations;
:func:`leading_growth_rate` checks this with ARPACK (rightmost eigenvalues), started from the test
fields' sources so that it looks at the modes they drive. It is a check, not a proof: ARPACK can
miss an eigenvalue, and a growing mode in a symmetry sector no test field reaches is ignored (in
exact arithmetic it stays unexcited; a time-stepped run would seed it by round-off).

Real representation: the half-grid arrays are complex, but the real-to-complex transforms make
``N`` only real-linear on the ``m_z = 0`` plane (its Hermitian symmetry is implied). The unknown is
therefore the complex array viewed as a real vector (real and imaginary parts), and ``N`` acts on
its Hermitian part; the anti-Hermitian part of that plane only sees the identity (or pure decay)
and stays zero. Iterative solves run in double precision.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.sparse.linalg as spla
from threadpoolctl import threadpool_limits

from kindyn.errors import NumericalError


def hermitian_part(b_hat: np.ndarray, layout) -> np.ndarray:
    """Copy of ``b_hat`` with the ``m_z = 0`` (and even-grid Nyquist) planes made Hermitian:
    ``b(m) <- (b(m) + conj(b(-m)))/2`` over ``(m_x, m_y)``. Needs a layout that holds whole
    ``(m_x, m_y)`` planes (serial; the direct steady solves run in one process)."""
    if getattr(layout, "processes", 1) != 1:
        raise ValueError("the direct steady test-field solves need a serial layout")
    out = b_hat.copy()
    nx, ny, nz = layout.grid
    rx, ry = (-np.arange(nx)) % nx, (-np.arange(ny)) % ny
    planes = [0] + ([nz // 2] if nz % 2 == 0 and nz > 1 else [])
    for p in planes:
        plane = b_hat[..., p]
        mirrored = np.conj(plane[..., rx, :][..., :, ry])
        out[..., p] = 0.5 * (plane + mirrored)
    return out


def _diffusion(operator, shift: float = 0.0) -> np.ndarray:
    """``eta |k|^2 + shift`` with the k = 0 value replaced by ``eta k_1^2`` (it only multiplies zeros).

    With a shift, the modes of the average (which only multiply zeros: ``P`` removes them) are set to
    one, and a shift that makes ``eta |k|^2 + shift <= 0`` on a kept fluctuation mode is refused
    (:class:`~kindyn.errors.NumericalError`): the shifted problem is singular there."""
    d = operator.decay_rates + float(shift)
    layout = operator.layout
    if shift:
        inner = getattr(operator, "operator", operator)  # TestProblems wraps the induction operator
        fluctuation = getattr(inner, "fluctuation_of", None)
        if fluctuation is not None:
            mean = np.broadcast_to(layout.mean_mode_mask(None if fluctuation == "box" else int(fluctuation)), d.shape)
            d[mean] = 1.0
            kept = np.broadcast_to(layout.dealias_mask, d.shape) & ~mean
            if np.any(d[kept] <= 1e-12 * operator.eta * layout.smallest_wavenumber ** 2):
                raise NumericalError(f"the shifted test problem (growth rate p = {shift:.6g}) is singular: p <= "
                                     f"-eta |k|^2 = {-float(np.min(operator.decay_rates[kept])):.6g} on a fluctuation "
                                     "mode (the mean-field mode decays as fast as the fluctuations diffuse)")
    if layout.uniform_mode is not None:
        d[layout.uniform_mode] = operator.eta * layout.smallest_wavenumber ** 2
    return d


def soca_solution(operator, t: float = 0.0, shift: float = 0.0) -> np.ndarray:
    """``b = S/(eta |k|^2 + shift)`` for every test of ``operator`` (steady flow), half-grid array.

    ``shift = p`` gives the response to a mean test field ``B_T exp(p t)`` (``b = b_hat exp(p t)``):
    the coefficients at the growth rate ``p`` of a mean-field mode (memory effects)."""
    source = np.empty(operator.shape, dtype=complex)
    operator.source(t, source)
    return source / _diffusion(operator, shift)


def full_solution(operator, tolerance: float = 1e-11, restart: int = 80, max_restarts: int = 60,
                  shift: float = 0.0):
    """Steady full solution ``(D + shift - N) b = S`` by GMRES; one test field per call (``shift`` as
    in :func:`soca_solution`; it must keep ``eta |k|^2 + shift > 0`` on the fluctuation modes).

    ``operator`` must hold exactly one test field (``3`` components). Returns ``(b_hat, info)``
    with ``info = {"residual": relative residual of (I - D^-1 N) b = D^-1 S, "iterations": n}``.
    Raises :class:`~kindyn.errors.NumericalError` when GMRES does not reach ``100 x tolerance``.
    """
    box, shape = operator.layout, operator.shape
    D = _diffusion(operator, shift)
    work = np.empty(shape, dtype=complex)
    counter = {"n": 0}

    def to_real(c):
        return np.ascontiguousarray(c).view(np.float64).ravel()

    def matvec(x):
        b = np.ascontiguousarray(x, dtype=np.float64).view(np.complex128).reshape(shape)
        operator.homogeneous(0.0, hermitian_part(b, box), work)
        counter["n"] += 1
        return to_real(b - work / D)

    rhs_c = soca_solution(operator, shift=shift)
    rhs = to_real(rhs_c)
    size = rhs.size
    A = spla.LinearOperator((size, size), matvec=matvec, dtype=np.float64)
    norm = float(np.linalg.norm(rhs))
    if norm == 0.0:
        return np.zeros(shape, dtype=complex), {"residual": 0.0, "iterations": 0}
    # small dense algebra inside GMRES: multithreaded BLAS is many times slower here than one thread
    with threadpool_limits(limits=1, user_api="blas"):
        x, _ = spla.gmres(A, rhs, x0=rhs.copy(), rtol=tolerance, atol=0.0, restart=min(restart, size),
                          maxiter=max_restarts)
    residual = float(np.linalg.norm(rhs - A.matvec(x))) / norm
    if not residual <= 100 * tolerance:
        raise NumericalError(f"the steady test-field solve (GMRES) reached a relative residual of {residual:.3g} "
                             f"(wanted {tolerance:.3g}) after {counter['n']} operator applications; the flow may be "
                             "near or above dynamo onset; use testfield.method = \"time\" with a reset interval")
    b = hermitian_part(x.view(np.complex128).reshape(shape), box)
    return b, {"residual": residual, "iterations": counter["n"]}


def leading_growth_rate(operator, seed_sources=None, count: int = 3, tolerance: float = 1e-5) -> float:
    """Largest real part of the eigenvalues of ``db/dt = N b - D b`` on fluctuations (one test's space).

    ARPACK (``which="LR"``) on the real representation; modes outside the fluctuation band only
    decay. ``seed_sources`` (optional list of half-grid source arrays ``S``) starts the Arnoldi
    iteration from a random combination of them, so that it explores the modes the test fields
    actually drive: a flow with a symmetry (e.g. z-independent) can have growing modes in a
    subspace that no test field reaches, and those do not spoil the steady solution. Returns
    ``nan`` when ARPACK does not converge.
    """
    box, shape = operator.layout, operator.shape
    D = _diffusion(operator)
    work = np.empty(shape, dtype=complex)

    def matvec(x):
        b = np.ascontiguousarray(x, dtype=np.float64).view(np.complex128).reshape(shape)
        operator.homogeneous(0.0, hermitian_part(b, box), work)
        return np.ascontiguousarray(work - D * b).view(np.float64).ravel()

    size = 2 * int(np.prod(shape))
    A = spla.LinearOperator((size, size), matvec=matvec, dtype=np.float64)
    rng = np.random.default_rng(20261202)
    if seed_sources:
        start = sum(w * hermitian_part(s, box) for w, s in zip(rng.standard_normal(len(seed_sources)), seed_sources))
        v0 = np.ascontiguousarray(start, dtype=np.complex128).view(np.float64).ravel()
    else:
        v0 = rng.standard_normal(size)
    if not np.any(v0):
        return -math.inf
    try:
        with threadpool_limits(limits=1, user_api="blas"):
            values = spla.eigs(A, k=count, which="LR", tol=tolerance, v0=v0,
                               ncv=max(2 * count + 1, 40), maxiter=2000, return_eigenvectors=False)
    except spla.ArpackNoConvergence as exc:
        values = exc.eigenvalues
        if values is None or len(values) == 0:
            return math.nan
    return float(np.max(np.real(values)))
