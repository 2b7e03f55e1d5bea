"""Independent dense Galerkin reference for kinematic dynamos of z-independent flows.

This module is test support only. It is written directly from the equations with
numpy/scipy and deliberately imports nothing from ``kindyn``, so that it can be used
to check kindyn's time-stepper and eigen-solver.

Equations and conventions (design.md section 1)
-----------------------------------------------
Induction equation with a prescribed velocity ``u(x, y[, t])`` that does not depend
on ``z``::

    dB/dt = curl(u x B) + eta * Lap(B),      div B = 0.

The box is periodic with period ``2*pi/k`` in x and y. Because ``u`` does not depend
on ``z`` the vertical wavenumber ``kz`` is a good quantum number and we seek::

    B(x, y, z, t) = b(x, y) * exp(i*kz*z + p*t),
    b(x, y)       = sum_{|m|, |n| <= M} b_{m,n} * exp(i*k*(m*x + n*y)),

i.e. a truncated *square* of Fourier modes with wavevectors ``q = (k*m, k*n, kz)``.
The velocity is a trigonometric polynomial given by its coefficients::

    u(x, y) = sum_{(m,n)} u_{m,n} * exp(i*k*(m*x + n*y))      (u_{-m,-n} = conj(u_{m,n}))

passed as a dict ``{(m, n): complex 3-vector}``. The linear operator is::

    (L b)_q = i q x (u x B)_q - eta |q|^2 b_q,
    (u x B)_q = sum_{q'} u_{q - q'} x b_{q'}         (exact convolution)

where contributions to modes outside the truncated square are dropped (Galerkin
truncation; exact for trigonometric-polynomial ``u`` apart from the truncation).
The growth rate is ``gamma = Re p`` and the angular frequency ``omega = Im p``;
the field amplitude grows like ``exp(gamma t)``.

Spurious modes and the mean field
---------------------------------
``L`` written on the three Cartesian components per mode also acts on
non-solenoidal (longitudinal, ``b_q || q``) vectors. Since the range of
``i q x (...)`` is always transverse to ``q`` and diffusion is diagonal, the
transverse (solenoidal) subspace is invariant, and the longitudinal part only decays
at ``-eta |q|^2``: those are spurious eigenvalues. ``solenoidal_induction_matrix``
restricts ``L`` exactly to the solenoidal subspace by using two real orthonormal
transverse polarisation vectors per wavevector.

When ``kz == 0`` the ``(0, 0)`` mode has ``q = 0``: all three components of the
uniform field are solenoidal and exactly neutral (``d<B>/dt = 0`` because the mean of
a curl vanishes). The zero-mean subspace is invariant, so by default
(``keep_mean=False``, as in design.md) the ``q = 0`` block is dropped, which removes
exactly three zero eigenvalues; ``keep_mean=True`` keeps it (three basis vectors
x, y, z there).

Symmetry used in the self-test: for real ``u``, if ``B`` is a solution so is
``conj(B)``, hence ``spectrum(-kz) = conj(spectrum(kz))`` for every real flow (and
``floquet(-kz) = conj(floquet(kz))``).

Optional exact speed-up: when the flow is invariant under a rotation by 90 degrees
about a vertical axis (the Roberts flows are; see ``roberts_rotation_centre``),
``leading_eigenvalues(..., c4_centre=...)`` solves the four symmetry blocks of ``L``
separately (same eigenvalues, ~5-15x faster at M = 16). Without it every solve is one
plain dense ``eigvals`` of the solenoidal matrix.

Truncation: for the Roberts "sum" flow (U = k = 1) the leading eigenvalue is
converged to < 1e-10 at M = 12 for eta >= 0.1 and at M = 16 for eta = 0.05.

Vector layout
-------------
Cartesian vectors are stored mode-major: index ``3*j + c`` with component
``c in (x, y, z)`` and mode index ``j = (m + M)*(2M + 1) + (n + M)``.
The solenoidal representation stores the coefficients on the basis returned by
``solenoidal_basis`` (columns of a real, orthonormal ``3N x N_s`` matrix).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

import numpy as np
import scipy.linalg
import scipy.sparse

__all__ = [
    "roberts_velocity_coefficients",
    "galloway_proctor_velocity_coefficients",
    "velocity_from_coefficients",
    "mode_wavevectors",
    "induction_sparse",
    "induction_matrix",
    "solenoidal_basis",
    "solenoidal_induction_matrix",
    "roberts_rotation_centre",
    "check_c4_invariance",
    "c4_symmetry_bases",
    "leading_eigenvalues",
    "floquet_multipliers",
]

VelocityCoefficients = Mapping[tuple[int, int], np.ndarray]


# --------------------------------------------------------------------------- flows
def _add(coeffs: dict, mode: tuple[int, int], component: int, value: complex) -> None:
    vec = coeffs.setdefault(mode, np.zeros(3, dtype=complex))
    vec[component] += value


def roberts_velocity_coefficients(U: float = 1.0, form: str = "sum") -> dict:
    """Fourier coefficients of the Roberts (1972) flow (arguments are ``k x``, ``k y``).

    ``form="sum"``:     ``u = U (cos ky, sin kx, cos kx + sin ky)``
    (``u = (psi_y, -psi_x, psi)`` with ``psi = cos kx + sin ky``; Beltrami,
    ``curl u = k u``).

    ``form="product"``: ``u = U (sin kx cos ky, -cos kx sin ky, sqrt(2) sin kx sin ky)``.

    Returns ``{(m, n): complex array (3,)}``.
    """
    if form == "sum":
        return galloway_proctor_velocity_coefficients(
            0.0, U=U * np.sqrt(2.0 / 3.0), epsilon=0.0
        )
    if form == "product":
        coeffs: dict = {}
        for sx in (1, -1):
            for sy in (1, -1):
                # sin x = sum_s s e^{isx}/(2i), cos y = sum_s e^{isy}/2
                _add(coeffs, (sx, sy), 0, U * sx / 4j)
                _add(coeffs, (sx, sy), 1, -U * sy / 4j)
                _add(coeffs, (sx, sy), 2, -np.sqrt(2.0) * U * sx * sy / 4.0)
        return coeffs
    raise ValueError(f"roberts_velocity_coefficients: form={form!r}; expected 'sum' or 'product'")


def galloway_proctor_velocity_coefficients(
    t: float,
    U: float = 1.0,
    epsilon: float = 1.0,
    omega: float = 1.0,
    polarisation: str = "circular",
) -> dict:
    """Fourier coefficients of the Galloway-Proctor (1992) flow at time ``t``.

    ``u = sqrt(3/2) U (cos(ky + b), sin(kx + a), cos(kx + a) + sin(ky + b))`` with
    ``a = eps cos(omega t)`` and ``b = eps sin(omega t)`` (circular) or
    ``b = eps cos(omega t)`` (linear). ``epsilon = 0`` gives ``sqrt(3/2)`` times the
    Roberts "sum" flow.
    """
    if polarisation == "circular":
        a, b = epsilon * np.cos(omega * t), epsilon * np.sin(omega * t)
    elif polarisation == "linear":
        a = b = epsilon * np.cos(omega * t)
    else:
        raise ValueError(
            f"galloway_proctor_velocity_coefficients: polarisation={polarisation!r}; "
            "expected 'circular' or 'linear'"
        )
    amp = np.sqrt(1.5) * U
    ea, eb = np.exp(1j * a), np.exp(1j * b)
    coeffs: dict = {}
    for s in (1, -1):
        pa, pb = ea if s == 1 else np.conj(ea), eb if s == 1 else np.conj(eb)
        _add(coeffs, (0, s), 0, amp * pb / 2)  # cos(ky + b)
        _add(coeffs, (s, 0), 1, amp * s * pa / 2j)  # sin(kx + a)
        _add(coeffs, (s, 0), 2, amp * pa / 2)  # cos(kx + a)
        _add(coeffs, (0, s), 2, amp * s * pb / 2j)  # sin(ky + b)
    return coeffs


def velocity_from_coefficients(coeffs: VelocityCoefficients, k: float, x, y) -> np.ndarray:
    """Evaluate ``u(x, y) = sum u_{m,n} exp(i k (m x + n y))``; shape ``(3,) + x.shape``.

    Returns the complex sum (its imaginary part vanishes for a real flow).
    """
    x, y = np.broadcast_arrays(np.asarray(x, float), np.asarray(y, float))
    out = np.zeros((3,) + x.shape, dtype=complex)
    for (m, n), vec in coeffs.items():
        out += np.asarray(vec, complex).reshape((3,) + (1,) * x.ndim) * np.exp(
            1j * k * (m * x + n * y)
        )
    return out


# ------------------------------------------------------------------------ operator
def mode_wavevectors(k: float, kz: float, M: int) -> np.ndarray:
    """Wavevectors ``q = (k m, k n, kz)`` of the truncated square, shape ``(N, 3)``.

    Mode ``j = (m + M)*(2M + 1) + (n + M)``, ``N = (2M + 1)**2``.
    """
    r = np.arange(-M, M + 1)
    m, n = np.meshgrid(r, r, indexing="ij")
    q = np.empty((m.size, 3))
    q[:, 0], q[:, 1], q[:, 2] = k * m.ravel(), k * n.ravel(), kz
    return q


def _cross_matrices(v: np.ndarray) -> np.ndarray:
    """``[v]_x`` with ``[v]_x w = v x w``; ``v`` shape ``(..., 3)`` -> ``(..., 3, 3)``."""
    out = np.zeros(v.shape[:-1] + (3, 3), dtype=np.result_type(v, float))
    out[..., 0, 1], out[..., 0, 2] = -v[..., 2], v[..., 1]
    out[..., 1, 0], out[..., 1, 2] = v[..., 2], -v[..., 0]
    out[..., 2, 0], out[..., 2, 1] = -v[..., 1], v[..., 0]
    return out


def _coupling_blocks(coeffs: VelocityCoefficients, k: float, kz: float, M: int):
    """Yield ``(rows, cols, blocks)``: mode ``cols[i]`` feeds mode ``rows[i]`` with the
    3x3 block ``i [q]_x [u_{q-q'}]_x`` (target ``q``, source ``q'``)."""
    side = 2 * M + 1
    q = mode_wavevectors(k, kz, M)
    qx = _cross_matrices(q)
    r = np.arange(-M, M + 1)
    m, n = (a.ravel() for a in np.meshgrid(r, r, indexing="ij"))
    for (dm, dn), vec in coeffs.items():
        vec = np.asarray(vec, dtype=complex)
        if vec.shape != (3,):
            raise ValueError(f"velocity coefficient {(dm, dn)} has shape {vec.shape}; expected (3,)")
        ms, ns = m - dm, n - dn  # source mode q' = q - (dm, dn)
        ok = (np.abs(ms) <= M) & (np.abs(ns) <= M)
        rows = np.flatnonzero(ok)
        cols = (ms[ok] + M) * side + (ns[ok] + M)
        blocks = 1j * qx[rows] @ _cross_matrices(vec)
        yield rows, cols, blocks


def induction_sparse(
    velocity_coefficients: VelocityCoefficients, k: float, kz: float, eta: float, M: int
) -> scipy.sparse.csr_matrix:
    """Sparse CSR form of ``induction_matrix`` (same layout and entries)."""
    N = (2 * M + 1) ** 2
    q = mode_wavevectors(k, kz, M)
    rows = [np.arange(3 * N)]
    cols = [np.arange(3 * N)]
    vals = [np.repeat(-eta * np.sum(q * q, axis=1), 3).astype(complex)]
    a, b = np.meshgrid(np.arange(3), np.arange(3), indexing="ij")
    for r, c, blocks in _coupling_blocks(velocity_coefficients, k, kz, M):
        rows.append((3 * r[:, None, None] + a).ravel())
        cols.append((3 * c[:, None, None] + b).ravel())
        vals.append(blocks.ravel())
    coo = scipy.sparse.coo_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(3 * N, 3 * N)
    )
    return coo.tocsr()  # duplicates (several velocity modes) are summed


def induction_matrix(
    velocity_coefficients: VelocityCoefficients, k: float, kz: float, eta: float, M: int
) -> np.ndarray:
    """Dense Cartesian Galerkin matrix of ``L b = i q x (u x B)_q - eta |q|^2 b_q``.

    Shape ``(3N, 3N)``, complex, ``N = (2M + 1)**2``, mode-major layout
    (index ``3*j + c``). Includes the spurious longitudinal modes (see module doc).
    """
    return induction_sparse(velocity_coefficients, k, kz, eta, M).toarray()


def _transverse_vectors(qj: np.ndarray, keep_mean: bool) -> list[np.ndarray]:
    qh, qn = np.hypot(qj[0], qj[1]), np.linalg.norm(qj)
    if qn == 0.0:
        return list(np.eye(3)) if keep_mean else []
    if qh == 0.0:
        return [np.array([1.0, 0.0, 0.0]), np.array([0.0, 1.0, 0.0])]
    e1 = np.array([-qj[1], qj[0], 0.0]) / qh
    return [e1, np.cross(qj, e1) / qn]


def solenoidal_basis(k: float, kz: float, M: int, keep_mean: bool = False) -> scipy.sparse.csr_matrix:
    """Real orthonormal basis of the solenoidal subspace, sparse ``(3N, N_s)``.

    For ``q`` with horizontal part ``q_h != 0``: ``e1 = (-q_y, q_x, 0)/|q_h|`` and
    ``e2 = q x e1 / |q|``. For ``q = (0, 0, kz != 0)``: ``e1 = x``, ``e2 = y``.
    For ``q = 0`` (only when ``kz == 0``): ``x, y, z`` if ``keep_mean`` else nothing.
    """
    q = mode_wavevectors(k, kz, M)
    rows, cols, vals = [], [], []
    col = 0
    for j, qj in enumerate(q):
        for v in _transverse_vectors(qj, keep_mean):
            for c in range(3):
                if v[c] != 0.0:
                    rows.append(3 * j + c)
                    cols.append(col)
                    vals.append(v[c])
            col += 1
    return scipy.sparse.csr_matrix((vals, (rows, cols)), shape=(3 * q.shape[0], col))


def _restrict(L: scipy.sparse.spmatrix, Q: scipy.sparse.spmatrix) -> np.ndarray:
    """Dense ``Q^H L Q``."""
    return np.asarray((Q.conj().T @ (L @ Q)).toarray())


def solenoidal_induction_matrix(
    velocity_coefficients: VelocityCoefficients,
    k: float,
    kz: float,
    eta: float,
    M: int,
    keep_mean: bool = False,
) -> np.ndarray:
    """``P^T L P``: the exact restriction of ``L`` to solenoidal fields, dense complex.

    ``P = solenoidal_basis(k, kz, M, keep_mean)``. Exact (not an approximation)
    because ``L P`` already lies in the span of ``P``.
    """
    P = solenoidal_basis(k, kz, M, keep_mean)
    return _restrict(induction_sparse(velocity_coefficients, k, kz, eta, M), P)


# ------------------------------------------------- optional symmetry reduction (C4)
_R4 = np.array([[0.0, -1.0, 0.0], [1.0, 0.0, 0.0], [0.0, 0.0, 1.0]])  # +90 deg about z


def roberts_rotation_centre(k: float = 1.0, form: str = "sum") -> tuple[float, float]:
    """A vertical axis ``(cx, cy)`` about which the Roberts flow is invariant under a
    rotation by 90 degrees: ``(0, pi/(2k))`` for "sum" (``psi = cos kx + sin ky``),
    ``(pi/(2k), pi/(2k))`` for "product" (``psi = sin kx sin ky``)."""
    h = np.pi / (2.0 * k)
    return {"sum": (0.0, h), "product": (h, h)}[form]


def _c4_phase(m: np.ndarray, n: np.ndarray, k: float, centre) -> np.ndarray:
    """Phase ``exp(i (q - R q).c)`` picked up by mode (m, n) under the rotation."""
    return np.exp(1j * k * ((m + n) * centre[0] + (n - m) * centre[1]))


def check_c4_invariance(velocity_coefficients: VelocityCoefficients, k: float, centre) -> None:
    """Raise ``ValueError`` unless ``u(g r) = R u(r)`` for ``g r = c + R (r - c)``.

    In Fourier space the field map ``(T B)(r) = R B(g^{-1} r)`` reads
    ``(T b)_{Rq} = exp(i (q - R q).c) R b_q`` with ``R (m, n) = (-n, m)``.
    """
    scale = max((np.abs(np.asarray(v)).max() for v in velocity_coefficients.values()), default=0.0)
    for (m, n), v in velocity_coefficients.items():
        image = _c4_phase(m, n, k, centre) * (_R4 @ np.asarray(v, complex))
        target = np.asarray(velocity_coefficients.get((-n, m), np.zeros(3)), complex)
        if np.abs(image - target).max() > 1e-12 * max(scale, 1.0):
            raise ValueError(
                f"velocity is not invariant under the 90-degree rotation about {tuple(centre)}: "
                f"mode {(m, n)} maps to {image}, but u{(-n, m)} = {target}"
            )


def c4_symmetry_bases(k: float, kz: float, M: int, centre, keep_mean: bool = False) -> list:
    """Orthonormal sparse bases ``Q_lambda`` (``3N x d``) of the solenoidal fields in the
    eigenspaces ``T B = lambda B``, ``lambda in (1, i, -1, -i)``, of the rotation map ``T``
    of ``check_c4_invariance``. Together they span the solenoidal subspace.

    Built orbit by orbit: for each orbit ``{q0, R q0, R^2 q0, R^3 q0}`` of the (square,
    rotation-invariant) truncation and each transverse vector ``e`` at ``q0``, the
    projection ``(1/4) sum_j lambda^{-j} T^j e`` is orthonormalised (SVD, so the fixed
    orbit ``q_h = 0`` is handled too).
    """
    side = 2 * M + 1
    q = mode_wavevectors(k, kz, M)
    lambdas = (1.0, 1j, -1.0, -1j)
    entries = {lam: ([], [], []) for lam in lambdas}
    ncols = dict.fromkeys(lambdas, 0)
    seen = np.zeros(side * side, dtype=bool)
    for m0 in range(-M, M + 1):
        for n0 in range(-M, M + 1):
            j0 = (m0 + M) * side + (n0 + M)
            if seen[j0]:
                continue
            orbit, phases = [], []  # T^j maps q0 to orbit[j] with accumulated phase
            m, n, ph = m0, n0, 1.0 + 0j
            for _ in range(4):
                j = (m + M) * side + (n + M)
                if j in orbit:
                    break
                orbit.append(j)
                phases.append(ph)
                ph = ph * _c4_phase(m, n, k, centre)
                m, n = -n, m
            seen[orbit] = True
            index = {j: i for i, j in enumerate(orbit)}
            for lam in lambdas:
                cands = []
                for e in _transverse_vectors(q[j0], keep_mean):
                    v = np.zeros((len(orbit), 3), dtype=complex)
                    mm, nn, ph, Re = m0, n0, 1.0 + 0j, e.astype(complex)
                    for p in range(4):  # add lambda^{-p} T^p e
                        v[index[(mm + M) * side + (nn + M)]] += lam ** (-p) * ph * Re
                        ph = ph * _c4_phase(mm, nn, k, centre)
                        mm, nn, Re = -nn, mm, _R4 @ Re
                    cands.append(v.ravel() / 4.0)
                if not cands:
                    continue
                U, s, _ = np.linalg.svd(np.array(cands).T, full_matrices=False)
                for col in U[:, s > 1e-10].T:
                    nz = np.flatnonzero(np.abs(col) > 0.0)
                    r, c, val = entries[lam]
                    r.extend(3 * np.asarray(orbit)[nz // 3] + nz % 3)
                    c.extend([ncols[lam]] * nz.size)
                    val.extend(col[nz])
                    ncols[lam] += 1
    return [
        scipy.sparse.csr_matrix((entries[lam][2], (entries[lam][0], entries[lam][1])), shape=(3 * side**2, ncols[lam]))
        for lam in lambdas
    ]


def _sort_by_real_part(ev: np.ndarray) -> np.ndarray:
    # round the primary key so that conjugate pairs sort by (descending) imaginary part
    scale = max(1.0, float(np.max(np.abs(ev)))) if ev.size else 1.0
    key_re = np.round(ev.real / scale, 11)
    return ev[np.lexsort((-ev.imag, -key_re))]


def leading_eigenvalues(
    velocity_coefficients: VelocityCoefficients,
    k: float,
    kz: float,
    eta: float,
    M: int,
    count: int | None = 3,
    keep_mean: bool = False,
    c4_centre: tuple[float, float] | None = None,
) -> np.ndarray:
    """Eigenvalues ``p = gamma + i omega`` of the solenoidal operator, sorted by real
    part descending (``count=None`` returns all). Uses ``scipy.linalg.eigvals``.

    ``c4_centre`` (optional, e.g. ``roberts_rotation_centre(k)``): the flow is invariant
    under a 90-degree rotation about this vertical axis (checked; ``ValueError`` if not),
    so ``L`` is block-diagonal on the four eigenspaces of the rotation and the four
    blocks (each ~1/4 of the size, ~16x cheaper in total) are solved separately. The
    result is the same set of eigenvalues.
    """
    if c4_centre is None:
        A = solenoidal_induction_matrix(velocity_coefficients, k, kz, eta, M, keep_mean)
        ev = scipy.linalg.eigvals(A, overwrite_a=True, check_finite=False)
    else:
        check_c4_invariance(velocity_coefficients, k, c4_centre)
        L = induction_sparse(velocity_coefficients, k, kz, eta, M)
        ev = np.concatenate(
            [
                scipy.linalg.eigvals(_restrict(L, Q), overwrite_a=True, check_finite=False)
                for Q in c4_symmetry_bases(k, kz, M, c4_centre, keep_mean)
                if Q.shape[1] > 0
            ]
        )
    ev = _sort_by_real_part(ev)
    return ev if count is None else ev[:count]


# ------------------------------------------------------------------------- Floquet
_GAUSS = (0.5 - np.sqrt(3.0) / 6.0, 0.5 + np.sqrt(3.0) / 6.0)


def floquet_multipliers(
    velocity_at_time: Callable[[float], VelocityCoefficients],
    k: float,
    kz: float,
    eta: float,
    M: int,
    period: float,
    steps: int,
    scheme: str = "magnus4",
    keep_mean: bool = False,
) -> np.ndarray:
    """Eigenvalues ``mu`` of the period map of ``db/dt = L(t) b`` (solenoidal), sorted by
    modulus descending. Floquet exponent ``p = log(mu)/period`` (``gamma = log|mu|/T``,
    ``omega = arg(mu)/T`` modulo ``2 pi/T``).

    The period map is a product of ``steps`` matrix exponentials, ordered later-left:

    - ``scheme="magnus4"`` (default, order 4): with ``A1, A2 = L(t + c_i h)`` at the
      two Gauss-Legendre nodes ``c = 1/2 -+ sqrt(3)/6``,
      ``Omega = h/2 (A1 + A2) + sqrt(3)/12 h^2 [A2, A1]``, step ``expm(Omega)``;
    - ``scheme="midpoint"`` (order 2): ``expm(h L(t + h/2))``.

    Both are exact for steady flows and unconditionally stable for the stiff diffusion.
    """
    if steps < 1:
        raise ValueError(f"floquet_multipliers: steps={steps}; expected >= 1")
    h = period / steps

    P = solenoidal_basis(k, kz, M, keep_mean)

    def A(t: float) -> np.ndarray:
        return _restrict(induction_sparse(velocity_at_time(t), k, kz, eta, M), P)

    Phi = None
    for s in range(steps):
        t0 = s * h
        if scheme == "magnus4":
            A1, A2 = A(t0 + _GAUSS[0] * h), A(t0 + _GAUSS[1] * h)
            Omega = 0.5 * h * (A1 + A2) + (np.sqrt(3.0) / 12.0) * h * h * (A2 @ A1 - A1 @ A2)
        elif scheme == "midpoint":
            Omega = h * A(t0 + 0.5 * h)
        else:
            raise ValueError(f"floquet_multipliers: scheme={scheme!r}; expected 'magnus4' or 'midpoint'")
        E = scipy.linalg.expm(Omega)
        Phi = E if Phi is None else E @ Phi
    mu = scipy.linalg.eigvals(Phi, overwrite_a=True, check_finite=False)
    return mu[np.argsort(-np.abs(mu), kind="stable")]
