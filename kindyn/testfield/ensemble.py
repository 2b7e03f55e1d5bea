"""Ensembles of a random flow: test-field coefficients of N realisations, combined.

Realisation ``r`` is the case with ``flow.seed = s + r`` (``s`` the case's seed). Each is calibrated on
its own (:func:`~kindyn.testfield.calibration.calibrate`; the points run through the sweep pools,
:mod:`kindyn.sweep.testfield_ensemble`) and gives, for every coefficient ``c``, a value ``c_r`` and
a time-averaging (block) standard error ``e_r``. Combined (for every entry of every tensor, and of
every derived quantity of :mod:`.full_set`, which is computed per realisation)::

    mean        c_bar = (1/N) sum_r c_r
    spread      s = sqrt( sum_r (c_r - c_bar)^2 / (N - 1) )       (realisation-to-realisation scatter)
    block       e2 = (1/N) sum_r e_r^2                             (mean time-averaging variance)
    standard error of the mean      SE = sqrt( max(s^2, e2) / N )
    intrinsic scatter               sigma_real = sqrt( max(s^2 - e2, 0) )

Why: ``s^2`` estimates the variance of one realisation's value, which *contains* its
time-averaging noise (``s^2 = sigma_real^2 + e2`` in expectation), so ``s/sqrt(N)`` is the standard
error of the mean and adding ``e2`` to it would count the averaging noise twice. With few
realisations ``s^2`` can fall below ``e2`` by chance; the block variances are a floor then
(common practice in the analysis of variance). For ``N = 1`` the standard error is the block error.
Direct steady solves (steady random flows) have no block error (``e_r`` NaN counts as 0).
"""

from __future__ import annotations

import numpy as np

COMBINATION = ("standard error = sqrt(max(s^2, mean block variance)/N), s = realisation spread (ddof 1); "
               "the spread contains the time-averaging noise, the block variance is a floor for small N")


def combine(values, errors) -> dict:
    """``{"mean", "spread", "standard_error", "intrinsic_spread", "block_error"}`` of stacked member values
    ``values`` ``(N, ...)`` and their block errors ``errors`` (same shape; NaN = none)."""
    v = np.asarray(values, float)
    e = np.nan_to_num(np.asarray(errors, float), nan=0.0, posinf=np.inf)
    n = v.shape[0]
    mean = v.mean(axis=0)
    e2 = np.mean(e ** 2, axis=0)
    if n > 1:
        s2 = v.var(axis=0, ddof=1)
        se = np.sqrt(np.maximum(s2, e2) / n)
        intrinsic = np.sqrt(np.maximum(s2 - e2, 0.0))
    else:
        s2, se, intrinsic = np.full_like(mean, np.nan), np.sqrt(e2), np.full_like(mean, np.nan)
    return {"mean": mean, "spread": np.sqrt(s2), "standard_error": se, "intrinsic_spread": intrinsic,
            "block_error": np.sqrt(e2)}


def combine_members(tensors: list, errors: list) -> tuple[dict, dict, dict]:
    """``(mean, standard error, statistics)`` per name over members (dicts of arrays; a name missing or
    None in any member is left out)."""
    names = [k for k in tensors[0] if all(t.get(k) is not None for t in tensors)]
    means, ses, stats = {}, {}, {}
    for k in names:
        c = combine([t[k] for t in tensors], [(err.get(k) if err.get(k) is not None else np.full_like(t[k], np.nan))
                                              for t, err in zip(tensors, errors)])
        means[k], ses[k], stats[k] = c["mean"], c["standard_error"], c
    return means, ses, stats


def ensemble_resolution(members: list, seeds) -> dict:
    """The resolution of an ensemble: the resolution dict (:func:`kindyn.testfield.resolution.resolution_check`)
    of its worst realisation (the flagged one with the largest cut-off ratio, else the largest ratio
    overall), with ``flagged_realisations`` / ``flagged_seeds`` (those whose criteria tripped) and a
    ``resolution_caution`` that names how many tripped. ``{}`` when no member recorded one."""
    checked = [(seed, m["resolution"]) for seed, m in zip(seeds, members) if m.get("resolution")]
    if not checked:
        return {}
    flagged = [int(seed) for seed, res in checked if res.get("resolution_warning")]

    def badness(item):
        res = item[1]
        return bool(res.get("resolution_warning")), float(res.get("cutoff_ratio") or 0.0)

    worst_seed, worst = max(checked, key=badness)
    out = {**worst, "worst_seed": int(worst_seed), "flagged_realisations": len(flagged), "flagged_seeds": flagged,
           "realisations_checked": len(checked)}
    if flagged:
        out["resolution_caution"] = (f"{len(flagged)} of {len(checked)} realisation(s) tripped a resolution criterion "
                                     f"(flow seeds {', '.join(map(str, flagged))}); the worst, flow seed "
                                     f"{worst_seed}: {worst.get('resolution_caution', '')}")
    return out


def ensemble_result(base, members: list, seeds) -> object:
    """A :class:`~kindyn.testfield.calibration.TestFieldResult` holding the ensemble means and standard
    errors of ``members`` (each a dict with ``tensors``, ``errors``, ``full_set``, ``full_set_errors``
    (arrays), ``converged``, ``stop_reason``, ``notes``), modelled on ``base`` (one member's result
    or the plan's empty result: axis, K, directions, scales)."""
    from kindyn.testfield.calibration import TestFieldResult
    from kindyn.testfield.full_set import findings

    means, ses, stats = combine_members([m["tensors"] for m in members], [m["errors"] for m in members])
    fs_means, fs_ses, _ = combine_members([m["full_set"] for m in members], [m["full_set_errors"] for m in members])
    converged = all(m["converged"] for m in members)
    reasons = sorted({m["stop_reason"] for m in members})
    r = TestFieldResult(base.axis, base.modes, np.asarray(base.K), base.method, base.Rm, base.eta, base.speed,
                        base.k_f, converged, "; ".join(reasons), tensors=means, errors=ses,
                        directions=base.directions, full_set=fs_means, full_set_errors=fs_ses)
    from kindyn.testfield.calibration import UNDER_RESOLVED

    n = len(members)
    r.resolution = ensemble_resolution(members, seeds)
    notes = []
    for m in members:  # a member's resolution caution is in the one ensemble caution below
        notes += [line for line in m["notes"] if line not in notes and not line.startswith(UNDER_RESOLVED)]
    if r.resolution.get("resolution_warning"):
        notes.insert(0, f"{UNDER_RESOLVED}: {r.resolution['resolution_caution']}")
    notes.append(f"ensemble of {n} realisation(s) (flow seeds {seeds[0]} .. {seeds[-1]}): values are ensemble "
                 f"means; errors are combined standard errors ({COMBINATION})")
    unconverged = [s for s, m in zip(seeds, members) if not m["converged"]]
    if unconverged:
        notes.append(f"{len(unconverged)} of {n} realisation(s) did not converge (flow seeds "
                     f"{', '.join(map(str, unconverged))}): their block errors enter the floor of the standard error")
    r.notes = notes
    r.solver = {"kind": f"ensemble of {n} realisations; each: {members[0].get('solver_kind', '')}".strip()}
    r.findings = findings(r)
    r.ensemble = {
        "count": n, "first_seed": int(seeds[0]), "seeds": [int(s) for s in seeds], "combination": COMBINATION,
        "spread": {k: stats[k]["spread"] for k in ("alpha_K", "eta_K", "alpha") if k in stats},
        "intrinsic_spread": {k: stats[k]["intrinsic_spread"] for k in ("alpha_K", "eta_K", "alpha") if k in stats},
        "block_error": {k: stats[k]["block_error"] for k in ("alpha_K", "eta_K", "alpha") if k in stats},
        "unconverged": len(unconverged),
    }
    r.members = members
    return r
