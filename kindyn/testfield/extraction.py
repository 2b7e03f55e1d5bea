"""From mean EMFs of the test problems to the alpha, eta and beta tensors.

Conventions (design.md section 1; row ``i`` = EMF component, column ``j`` = mean-field component)::

    Ebar_i = alpha_ij Bbar_j + beta_ijk d_k Bbar_j
    Ebar_i = alpha_ij Bbar_j - eta_ij (curl Bbar)_j            (planar averages along s)

**Uniform test fields** ``B_T = e_j`` (box average): ``alpha_ij = Ebar_i`` of test ``j`` exactly.

**Sinusoidal test fields** along ``s`` (see :mod:`kindyn.testfield.fields`): for the two
perpendicular components ``j`` (``p < q``) both ``Bbar`` and ``curl Bbar`` lie in the plane, so the
unknowns of row ``i`` are ``alpha_ip, alpha_iq, eta_ip, eta_iq``. With the four tests
``e_p cos, e_p sin, e_q cos, e_q sin`` the EMF profiles satisfy, at every ``s``::

    E_i^(T)(s) = sum_j alpha_ij Bbar_j^(T)(s) - eta_ij (curl Bbar^(T))_j(s)

which is solved for the coefficients by least squares over all tests and grid points of ``s``.
The design columns are orthogonal, so this equals the usual projection: for ``s = z``,
``alpha_ix = <E^(xc) cos Kz + E^(xs) sin Kz>`` and ``eta_iy K = <E^(xc) sin Kz - E^(xs) cos Kz>``.
It is exact when the coefficients do not depend on ``s`` and gives their ``s``-average otherwise.

Results per K are ``3 x 2`` arrays (row ``i`` = x, y, z; column = ``p, q``). The planar ``beta``
has only ``k = s``: ``beta_ijs = -eta_il eps_lsj`` (so ``beta_ijs d_s Bbar_j = -eta_il (curl Bbar)_l``).
"""

from __future__ import annotations

import numpy as np

from kindyn.testfield.fields import TestField, sinusoidal_test_fields


def alpha_from_uniform(emf: np.ndarray) -> np.ndarray:
    """``alpha_ij`` (3 x 3) from the box-mean EMFs ``emf[j] = Ebar`` of ``B_T = e_j`` (shape ``(3, 3)``)."""
    return np.asarray(emf, float).T.copy()


def design_matrix(fields, s: np.ndarray) -> np.ndarray:
    """Rows: (test, grid point of ``s``); columns: ``alpha_ip, alpha_iq, eta_ip, eta_iq``.

    ``Ebar_i^(T)(s) = sum_c A[(T, s), c] x_c`` with ``x = (alpha_ip, alpha_iq, eta_ip, eta_iq)``.
    """
    axis = fields[0].axis
    perp = [j for j in range(3) if j != axis]
    rows = []
    for f in fields:
        B, J = f.mean_field(s), f.mean_current(s)
        rows.append(np.stack([B[perp[0]], B[perp[1]], -J[perp[0]], -J[perp[1]]], axis=1))
    return np.concatenate(rows, axis=0)


def coefficients_from_profiles(emf_profiles: np.ndarray, fields, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(alpha, eta)``, each ``3 x 2``, from the EMF profiles of the four tests of one K.

    ``emf_profiles`` has shape ``(4, 3, len(s))`` (test, EMF component, position along the axis).
    """
    A = design_matrix(fields, s)
    emf = np.asarray(emf_profiles, float)
    rhs = np.concatenate([emf[t].T for t in range(len(fields))], axis=0)  # (4 ns, 3)
    solution, *_ = np.linalg.lstsq(A, rhs, rcond=None)  # (4, 3)
    return solution[:2].T.copy(), solution[2:].T.copy()


def beta_from_eta(eta: np.ndarray, axis: int) -> np.ndarray:
    """Planar ``beta_ijs`` (``3 x 2``, column = perpendicular ``j``) from ``eta_il`` (``3 x 2``)."""
    perp = [j for j in range(3) if j != axis]
    eps = np.zeros((3, 3, 3))
    eps[0, 1, 2] = eps[1, 2, 0] = eps[2, 0, 1] = 1.0
    eps[0, 2, 1] = eps[2, 1, 0] = eps[1, 0, 2] = -1.0
    eta3 = np.zeros((3, 3))
    eta3[:, perp] = eta
    beta = -np.einsum("il,lj->ij", eta3, eps[:, axis, :])
    return beta[:, perp]


def manufactured_emf(alpha: np.ndarray, eta: np.ndarray, fields, s: np.ndarray,
                     alpha_profile=None, eta_profile=None) -> np.ndarray:
    """EMF profiles ``(4, 3, len(s))`` produced by given ``3 x 2`` tensors (for exact tests).

    ``alpha_profile(s)``/``eta_profile(s)`` (optional) multiply the tensors to make them depend on
    ``s``; the extraction then returns their ``s``-average weighted as described above.
    """
    a = np.ones_like(s) if alpha_profile is None else alpha_profile(s)
    e = np.ones_like(s) if eta_profile is None else eta_profile(s)
    axis = fields[0].axis
    perp = [j for j in range(3) if j != axis]
    out = []
    for f in fields:
        B, J = f.mean_field(s)[perp], f.mean_current(s)[perp]
        out.append(a[None, :] * (alpha @ B) - e[None, :] * (eta @ J))
    return np.stack(out)


def planar_tests(axis: int, modes, wavenumbers) -> list[tuple[TestField, ...]]:
    """The four sinusoidal test fields of every K, in the order of ``modes``."""
    return [sinusoidal_test_fields(axis, m, K) for m, K in zip(modes, wavenumbers)]


def horizontal_parts(alpha: np.ndarray, eta: np.ndarray, axis: int) -> tuple[float, float]:
    """Mean of the in-plane diagonal: ``((alpha_pp + alpha_qq)/2, (eta_pp + eta_qq)/2)``."""
    perp = [j for j in range(3) if j != axis]
    a = 0.5 * (alpha[perp[0], 0] + alpha[perp[1], 1])
    e = 0.5 * (eta[perp[0], 0] + eta[perp[1], 1])
    return float(a), float(e)
