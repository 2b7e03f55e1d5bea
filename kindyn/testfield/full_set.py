"""The full coefficient set: beta_ijk from all three averaging directions and Rädler's decomposition.

Conventions (design.md section 1; row ``i`` = EMF component, ``j`` = mean-field component, ``k`` =
derivative direction)::

    Ebar_i = a_ij Bbar_j + b_ijk d_k Bbar_j                                          (1)

(``a`` = the ``alpha`` of the uniform test fields, ``b`` = ``beta_ijk``). Planar averages along
``s`` give ``b_ijs`` for ``j`` perpendicular to ``s`` through ``b_ijs = -eta_il eps_lsj``
(:func:`kindyn.testfield.extraction.beta_from_eta`), so the three directions give every ``b_ijk``
with ``j != k`` (18 of 27).

**Not determined** (stored as NaN, flag 0, never as zeros): the nine ``b_ijj`` (no sum). They
multiply ``d_j Bbar_j`` (no sum), and a planar mean field depends on one coordinate ``s`` only, so
``div Bbar = d_s Bbar_s = 0`` makes ``Bbar_s`` uniform: no planar test field has ``d_j Bbar_j != 0``.
Of them, the three sums ``sum_j b_ijj`` can never be determined (they multiply ``div Bbar = 0``);
the six differences would need test fields that depend on two coordinates (averages along lines).

**Rädler's irreducible form** (Rädler 1980, Astron. Nachr. 301, 101; in the test-field form of
Brandenburg, Rädler, Rheinhardt & Käpylä 2008, ApJ 676, 740, their eqs. 2-6 — the formulas below
are recalled from memory and re-derived here from (1))::

    Ebar = alpha . Bbar + gamma x Bbar - beta . J - delta x J - kappa . (grad Bbar)^(s),   J = curl Bbar

    alpha_ij = (a_ij + a_ji)/2                      gamma_i = -(1/2) eps_ijk a_jk
    eta_il   = (1/2) eps_ljk b_ijk                  (the tensor with Ebar = ... - eta . J; isotropic: eta_t delta_il)
    beta_ij  = (eta_ij + eta_ji)/2                  delta_i = -(1/2) eps_ijk eta_jk = (1/4)(b_jji - b_jij)
    kappa_ijk = -(1/2)(b_ijk + b_ikj)               ((grad Bbar)^(s)_jk = (d_k Bbar_j + d_j Bbar_k)/2)

Derivation: ``d_k Bbar_j = (1/2) eps_kjl J_l + (grad Bbar)^(s)_jk``, so ``b_ijk d_k Bbar_j =
-eta_il J_l + b_ijk (grad Bbar)^(s)_jk``; ``eta`` splits into its symmetric part ``beta`` and the
antisymmetric part ``eta^A_il = eps_iml delta_m`` (so ``-eta^A . J = -delta x J``). ``eta`` and ``delta``
need only ``b_ijk`` with ``j != k``, so they are fully determined by the three directions;
``kappa_ijk`` is determined for ``j != k`` (nine components, symmetric in ``j, k``) and not for
``j = k``. For an isotropic flow ``b_ijk = eta_t eps_ijk``: ``eta_il = eta_t delta_il``,
``beta = eta_t I``, ``delta = kappa = 0``.

**One direction only** (``all_directions = false``): ``b_ijs`` (six components) and the pumping
along ``s`` from the in-plane block of ``alpha(K)``, ``gamma_s(K) = -(1/2) eps_spq (a_pq - a_qp)``;
``eta``, ``delta`` and ``kappa`` do not separate there. Reported instead is the planar antisymmetric
part ``delta_s^planar = (eta^(s)_qp - eta^(s)_pq)/2`` for ``(p, q, s)`` cyclic, which equals
``delta_s - (kappa_pps + kappa_qqs)/2`` (the Rädler term plus kappa contributions).

``gamma`` at ``K = 0`` (uniform fields, the full vector) and ``gamma(K)`` per direction (component
``s`` from the averages along ``s``).

Errors: every quantity here is linear in the measured tensors, so for time-stepped runs it is
computed on every averaging block and its error is estimated from the block series exactly as
the measured tensors' errors are (:func:`block_estimates`): correlations between components are
kept. Direct steady solves have no statistical error (NaN).
"""

from __future__ import annotations

import numpy as np

from kindyn.testfield.averaging import block_standard_error
from kindyn.testfield.extraction import beta_from_eta

AXES = "xyz"
EPS = np.zeros((3, 3, 3))
EPS[0, 1, 2] = EPS[1, 2, 0] = EPS[2, 0, 1] = 1.0
EPS[0, 2, 1] = EPS[2, 1, 0] = EPS[1, 0, 2] = -1.0

SIGNS = ("Ebar_i = a_ij Bbar_j + b_ijk d_k Bbar_j = alpha_ij Bbar_j + (gamma x Bbar)_i - beta_ij J_j - "
         "(delta x J)_i - kappa_ijk (grad Bbar)^(s)_jk, J = curl Bbar; alpha_ij = (a_ij + a_ji)/2, "
         "gamma_i = -eps_ijk a_jk/2, eta_il = eps_ljk b_ijk/2, beta_ij = (eta_ij + eta_ji)/2, "
         "delta_i = -eps_ijk eta_jk/2, kappa_ijk = -(b_ijk + b_ikj)/2 (Raedler 1980; Brandenburg, Raedler, "
         "Rheinhardt & Kaepylae 2008, ApJ 676, 740, recalled from memory); planar averages along s: "
         "b_ijs = -eta_il eps_lsj")
UNDETERMINED = ("b_ijj (no sum, nine components: beta_xxx, beta_xyy, beta_xzz, ...) and kappa_ijj are not "
                "determined by planar-averaged test fields: they multiply d_j Bbar_j, which vanishes for every "
                "mean field that depends on one coordinate s only (div Bbar = d_s Bbar_s = 0 makes Bbar_s "
                "uniform); the sums sum_j b_ijj multiply div Bbar = 0 and are undeterminable with any test "
                "fields, the differences would need test fields depending on two coordinates. They are "
                "stored as NaN with determined = 0, never as zeros")
ONE_AXIS = ("one averaging direction: b_ijs for j perpendicular to s only; eta_ij, beta_ij, delta and kappa need "
            "all three directions (testfield.all_directions = true); delta_planar_s = (eta_qp - eta_pq)/2 "
            "((p, q, s) cyclic) equals delta_s - (kappa_pps + kappa_qqs)/2")


def determined_mask() -> np.ndarray:
    """``(3, 3, 3)`` bool: ``b_ijk`` (and ``kappa_ijk``) determined by the three directions (``j != k``)."""
    mask = np.ones((3, 3, 3), bool)
    for j in range(3):
        mask[:, j, j] = False
    return mask


def beta_tensor(eta_by_axis: dict) -> np.ndarray:
    """``b_ijk`` ``(3, 3, 3)`` from the planar ``eta^(s)`` (``3 x 2`` each, ``{s: eta}``); NaN where not
    determined (``j = k``, or direction ``k`` missing)."""
    b = np.full((3, 3, 3), np.nan)
    for s, eta in eta_by_axis.items():
        perp = [j for j in range(3) if j != s]
        b[:, perp, s] = beta_from_eta(np.asarray(eta, float), s)
    return b


def alpha_parts(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(alpha_ij, gamma_i)``: symmetric part and pumping vector of the ``3 x 3`` ``a_ij``."""
    a = np.asarray(a, float)
    return 0.5 * (a + a.T), -0.5 * np.einsum("ijk,jk->i", EPS, a)


def eta_from_beta(b: np.ndarray) -> np.ndarray:
    """``eta_il = (1/2) eps_ljk b_ijk`` (needs only ``j != k``; NaN if one of those is missing)."""
    b = np.asarray(b, float)
    mask = determined_mask()
    if np.any(np.isnan(b[mask])):
        return np.full((3, 3), np.nan)
    return 0.5 * np.einsum("ljk,ijk->il", EPS, np.where(mask, b, 0.0))


def beta_parts(b: np.ndarray) -> dict:
    """``eta_ij``, ``beta_ij`` (symmetric), ``delta_i`` and ``kappa_ijk`` (NaN where ``j = k``) of ``b_ijk``."""
    eta = eta_from_beta(b)
    kappa = -0.5 * (b + np.swapaxes(b, 1, 2))
    kappa[~determined_mask()] = np.nan
    return {"eta_ij": eta, "beta_sym": 0.5 * (eta + eta.T), "delta": -0.5 * np.einsum("ijk,jk->i", EPS, eta),
            "kappa": kappa}


def planar_gamma(alpha: np.ndarray, s: int) -> float:
    """``gamma_s(K) = -(1/2) eps_spq (a_pq - a_qp)`` from the ``3 x 2`` planar ``alpha`` along ``s``."""
    p, q = [j for j in range(3) if j != s]
    return float(-0.5 * EPS[s, p, q] * (alpha[p, 1] - alpha[q, 0]))


def planar_delta(eta: np.ndarray, s: int) -> float:
    """``(eta_qp - eta_pq)/2`` for ``(p, q, s)`` cyclic, from the ``3 x 2`` planar ``eta`` along ``s``."""
    perp = [j for j in range(3) if j != s]
    p, q = (s + 1) % 3, (s + 2) % 3
    col = {j: c for c, j in enumerate(perp)}
    return float(0.5 * (eta[q, col[p]] - eta[p, col[q]]))


def derive(values: dict, directions, primary: int, soca: bool) -> dict:
    """Every derived quantity from the measured tensors ``values`` (names as in
    :class:`~kindyn.testfield.calibration.TestFieldResult`; per-direction planar names from
    :func:`planar_name`). Shapes: ``alpha_sym (3, 3)``, ``gamma (3,)`` (uniform fields, when computed);
    per K: ``gamma_K (nK, 3)``, ``delta_planar (nK, 3)`` (component ``s`` from direction ``s``, NaN
    elsewhere), ``beta_ijk (nK, 3, 3, 3)``; with all three directions also ``eta_ij (nK, 3, 3)``,
    ``beta_sym (nK, 3, 3)``, ``delta (nK, 3)``, ``kappa (nK, 3, 3, 3)``."""
    sfx = "_soca" if soca else ""
    out = {}
    if values.get("alpha" + sfx) is not None:
        out["alpha_sym"], out["gamma"] = alpha_parts(values["alpha" + sfx])
    first = values[planar_name("alpha_K", directions[0], primary, soca)]
    nK = len(first)
    gamma_K, delta_planar = np.full((nK, 3), np.nan), np.full((nK, 3), np.nan)
    betas = []
    for n in range(nK):
        etas = {}
        for s in directions:
            a = np.asarray(values[planar_name("alpha_K", s, primary, soca)][n], float)
            e = np.asarray(values[planar_name("eta_K", s, primary, soca)][n], float)
            gamma_K[n, s] = planar_gamma(a, s)
            delta_planar[n, s] = planar_delta(e, s)
            etas[s] = e
        betas.append(beta_tensor(etas))
    out["gamma_K"], out["delta_planar"], out["beta_ijk"] = gamma_K, delta_planar, np.stack(betas)
    if len(set(directions)) == 3:
        parts = [beta_parts(b) for b in betas]
        for key in ("eta_ij", "beta_sym", "delta", "kappa"):
            out[key] = np.stack([p[key] for p in parts])
    return {k + sfx: v for k, v in out.items()}


def planar_name(base: str, axis: int, primary: int, soca: bool = False) -> str:
    """Name of a planar tensor: ``alpha_K`` / ``eta_K`` for the primary axis, ``alpha_K_x`` ... for the
    others, ``_soca`` appended for SOCA."""
    return base + ("" if axis == primary else "_" + AXES[axis]) + ("_soca" if soca else "")


def derive_both(values: dict, directions, primary: int) -> dict:
    return {**derive(values, directions, primary, False), **derive(values, directions, primary, True)}


def block_estimates(record, mode: str, directions, primary: int) -> dict:
    """Errors of the derived quantities from the time-stepping blocks (module docstring): the derived
    set of every block, then the mean of the valid blocks with :func:`block_standard_error` ("mean"
    mode) or the change over the last block ("end" mode, steady flows)."""
    valid = np.flatnonzero(np.asarray(record.valid, bool))
    names = list(record.values)
    blocks = [derive_both({k: record.values[k][i] for k in names}, directions, primary) for i in valid]
    if not blocks:
        return {}
    out = {}
    for key in blocks[0]:
        series = np.stack([b[key] for b in blocks])
        if mode == "end":
            out[key] = np.abs(series[-1] - series[-2]) if len(series) >= 2 else np.full(series.shape[1:], np.inf)
        else:
            nan = np.isnan(series[0])
            err = block_standard_error(np.nan_to_num(series))
            out[key] = np.where(nan, np.nan, err)
    return out


def findings(result, sigma: float = 2.0) -> list[dict]:
    """Negative eddy diffusivity and negative total diffusivity, per direction and K (and the smallest
    eigenvalue of ``eta delta_ij + beta_ij`` with all three directions), each with its error.

    A finding is ``significant`` when the value is below zero by more than ``sigma`` times its error
    (always, for direct solves, whose values have no statistical error)."""
    out = []
    eta = result.eta

    def entry(kind, text, K, value, error, direction):
        err = None if error is None or not np.isfinite(error) else float(error)
        significant = err is None or value + sigma * err < 0
        return {"kind": kind, "direction": direction, "K": float(K), "value": float(value), "error": err,
                "significant": bool(significant), "text": text}

    for s in result.directions:
        _, h = result.horizontal(axis=s)
        _, eh = result.horizontal_errors(axis=s)
        for K, v, e in zip(result.K, h, eh):
            if v < 0:
                out.append(entry("negative_eddy_diffusivity",
                                 f"negative eddy diffusivity: eta_t = {v:.4g} at K = {K:.4g} (averages along "
                                 f"{AXES[s]})", K, v, e, AXES[s]))
            if eta + v < 0:
                out.append(entry("negative_total_diffusivity",
                                 f"negative total diffusivity eta + eta_t = {eta + v:.4g} at K = {K:.4g} (averages "
                                 f"along {AXES[s]}): mean fields of this scale grow without alpha", K, eta + v, e,
                                 AXES[s]))
    beta_sym = result.full_set.get("beta_sym")
    if beta_sym is not None:
        errs = result.full_set_errors.get("beta_sym")
        for n, (K, b) in enumerate(zip(result.K, beta_sym)):
            if not np.all(np.isfinite(b)):
                continue
            w = np.linalg.eigvalsh(eta * np.eye(3) + b)
            if w[0] < 0:
                e = None if errs is None else float(np.max(np.abs(errs[n])))
                out.append(entry("negative_total_diffusivity_tensor",
                                 f"eta delta_ij + beta_ij has a negative eigenvalue {w[0]:.4g} at K = {K:.4g}: "
                                 "a mean-field instability without alpha", K, w[0], e, "xyz"))
    return out
