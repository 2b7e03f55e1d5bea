"""Closures verified across scales: predicted growth rates of mean-field modes beside direct runs.

The case box holds ``m_f`` periods of the flow along the averaging axis ``s`` (``L_s = m_f x`` the
flow's period; e.g. the ABC flow with ``k = 1`` in ``L_z = 8 pi``: ``m_f = 4``). For every mode ``n`` of
``testfield.modes`` (``K = 2 pi n / L_s``) the growth rate of the mean-field mode is predicted by

* ``measured``: ``p = |alpha(K)| K - (eta + eta_t(K)) K^2`` from the test-field coefficients at K
  (in-plane means), and ``measured_matrix``: the leading eigenvalue of the in-plane problem with the
  full ``2 x 2`` alpha and eta (anisotropy, pumping; :func:`kindyn.testfield.closure.anisotropic_growth_rate`);
* ``soca``: the same two with the SOCA coefficients at K;
* ``local``: the local closure, ``alpha(0)`` of the uniform test fields (in-plane mean) and
  ``eta_t(0)``, the ``K -> 0`` value ``c_0`` of the Lorentzian fit of ``eta_t(K)`` over the listed K
  (:mod:`.kernels`);
* ``memory`` (steady flows, direct solves): coefficients at the mode's own growth rate with its
  harmonics coupled up to ``testfield.closure_coupling`` orders (:mod:`.memory`), with the error
  ``|last iteration change| + the larger change from the two previous coupling orders`` (one order
  can add nothing by a selection rule: for ABC, K couples to K +- 2 k_f but not to K +- k_f);
  ``memory_soca``: the same in SOCA.

The **direct run** of mode ``n`` is ``kindyn run`` in the box whose ``L_s = 2 pi / K = L_s / n`` (grid
``n_s / n`` along ``s``), where the mode is the box-scale mean field; it exists when the flow fits that
box (``n`` divides ``m_f`` and ``n_s``, checked by sampling the flow) and is ``n/a`` otherwise. Its
growth rate is that of the box's fastest mode, so the share of that mode's energy in the box-scale
planar mean is reported beside it (a share well below 1 means it may be another mode).

Each prediction gets ``(p - p_direct)/|p_direct|`` and ``|p - p_direct|`` in units of the combined
error ``sqrt(err_p^2 + err_direct^2)``; a prediction "holds" when that is at most
:data:`AGREEMENT_SIGMAS`. Predictions from steady coefficients are set beside memory-consistent ones
so that a disagreement can be told apart from the memory effect. SOCA's departure is expected to be
``p_soca - p_measured`` (the amount the SOCA/full ratio of the coefficients implies), reported as
``soca_expected_departure``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from kindyn.errors import CaseError, NumericalError
from kindyn.testfield.closure import anisotropic_growth_rate, box_scale_mean_share, mean_field_growth_rate
from kindyn.testfield.memory import ShiftedResponses, harmonic_levels, memory_growth_rate

AGREEMENT_SIGMAS = 3.0
PREDICTIONS = ("measured", "measured_matrix", "soca", "soca_matrix", "local", "memory", "memory_soca")
LABELS = {
    "measured": "measured alpha(K), eta_t(K): |alpha| K - (eta + eta_t) K^2",
    "measured_matrix": "measured 2x2 tensors at K (eigenvalue)",
    "soca": "SOCA alpha(K), eta_t(K)",
    "soca_matrix": "SOCA 2x2 tensors at K (eigenvalue)",
    "local": "local closure: alpha(0), eta_t(K -> 0)",
    "memory": "measured at the mode's own p, harmonics coupled",
    "memory_soca": "SOCA at the mode's own p, harmonics coupled",
}
MAX_PERIODS = 64


@dataclass
class ScaleComparison:
    """Per K: predictions (name -> arrays), direct runs, relative differences; plain arrays."""

    K: np.ndarray
    modes: tuple
    axis: int
    eta: float
    k_f: float
    periods: int
    predictions: dict = field(default_factory=dict)
    prediction_errors: dict = field(default_factory=dict)
    direct: np.ndarray = None
    direct_error: np.ndarray = None
    direct_share: np.ndarray = None
    direct_length: np.ndarray = None
    harmonics: list = field(default_factory=list)
    memory_details: list = field(default_factory=list)
    local: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    calibration: object = None

    def relative(self, name: str) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return (self.predictions[name] - self.direct) / np.abs(self.direct)

    def sigmas(self, name: str) -> np.ndarray:
        e = np.nan_to_num(self.prediction_errors.get(name, np.zeros_like(self.K)), nan=0.0)
        d = np.nan_to_num(self.direct_error, nan=0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.abs(self.predictions[name] - self.direct) / np.hypot(e, d)

    def holds(self, name: str) -> np.ndarray:
        """1 where the prediction agrees with the direct run within AGREEMENT_SIGMAS, 0 where not, -1 n/a."""
        s = self.sigmas(name)
        out = np.where(s <= AGREEMENT_SIGMAS, 1, 0)
        return np.where(np.isfinite(self.predictions[name]) & np.isfinite(self.direct), out, -1)

    @property
    def soca_expected_departure(self) -> np.ndarray:
        return self.predictions["soca"] - self.predictions["measured"]


def flow_periods(case, axis: int) -> int:
    """The largest ``m <= MAX_PERIODS`` dividing the grid along ``axis`` with the flow invariant under a
    shift by ``L_axis / m`` (sampled at random points and a few times; 1e-12 of U)."""
    box, flow = case.box, case.flow
    rng = np.random.default_rng(11)
    points = rng.uniform(0, 1, (3, 64)) * np.asarray(box.lengths)[:, None]
    times = [0.0] if flow.steady else [0.0, 0.37, 1.3]
    scale = 1e-12 * max(flow.speed, 1e-300)
    best = 1
    n = box.grid[axis]
    for m in range(2, min(MAX_PERIODS, n) + 1):
        if n % m:
            continue
        shifted = points.copy()
        shifted[axis] += box.lengths[axis] / m
        ok = True
        for t in times:
            a = np.asarray(flow.velocity(*points, t), float)
            b = np.asarray(flow.velocity(*shifted, t), float)
            if np.max(np.abs(a - b)) > scale:
                ok = False
                break
        if ok:
            best = m
    return best


def shrunk_case(case, axis: int, mode: int):
    """The case in the box with ``L_axis / mode`` (grid ``n_axis / mode``), or None when the flow does not fit
    it (the same velocity, sampled, is required)."""
    from kindyn.case import load_case
    from kindyn.errors import KindynError

    if mode == 1:
        return case
    box = case.box
    if box.grid[axis] % mode:
        return None
    lengths, grid = list(box.lengths), list(box.grid)
    lengths[axis] /= mode
    grid[axis] //= mode
    overrides = [*case.overrides, f"domain.lengths={[float(v) for v in lengths]}", f"domain.grid={grid}",
                 "testfield.closure=false"]
    try:
        small = load_case(case.path, overrides, text=case.text)
    except KindynError:
        return None
    rng = np.random.default_rng(3)
    points = rng.uniform(0, 1, (3, 32)) * np.asarray(lengths)[:, None]
    times = [0.0] if case.flow.steady else [0.0, 0.41]
    for t in times:
        a = np.asarray(case.flow.velocity(*points, t), float)
        b = np.asarray(small.flow.velocity(*points, t), float)
        if np.max(np.abs(a - b)) > 1e-12 * max(case.flow.speed, 1e-300):
            return None
    return small


def compare_scales(case, calibrate, direct_run=None, progress=None) -> ScaleComparison:
    """Everything of the module docstring for ``case`` (``calibrate(case) -> TestFieldResult``;
    ``direct_run(case) -> (rate, error, b_hat, caution)``, supplied by the command (this layer does not
    import the run driver); without it the direct
    runs are skipped with a note)."""
    from kindyn.array_kernels import make_kernels
    from kindyn.testfield.calibration import _layout
    from kindyn.testfield.settings import plan_from_case

    say = progress or (lambda text: None)
    plan = plan_from_case(case)
    if not plan.uniform:
        raise CaseError(case.path, "testfield.uniform", False,
                        "true for kindyn closure: the local closure needs alpha(0) of the uniform test fields")
    s = plan.axis
    say("test-field coefficients at every K")
    result = calibrate(case)
    K = np.asarray(result.K, float)
    eta = case.eta
    periods = flow_periods(case, s)
    out = ScaleComparison(K, plan.modes, s, eta, case.flow.wavenumber, periods, calibration=result)
    if not result.converged:
        out.notes.append(f"the test-field calibration did not converge ({result.stop_reason}): the predictions "
                         "from its coefficients carry their errors, and are n/a where it gave no value "
                         "(raise testfield.max_time)")
    nK = len(K)
    a, h = result.horizontal()
    ea, eh = result.horizontal_errors()
    a_s, h_s = result.horizontal(soca=True)
    ea_s, eh_s = result.horizontal_errors(soca=True)
    nan = np.full(nK, np.nan)

    def err(dk_a, dk_h):
        v = K * np.abs(dk_a) + K ** 2 * np.abs(dk_h)
        return np.where(np.isfinite(v), v, np.nan)

    out.predictions["measured"] = np.array([mean_field_growth_rate(a[i], h[i], eta, K[i]) for i in range(nK)])
    out.prediction_errors["measured"] = err(ea, eh)
    out.predictions["soca"] = np.array([mean_field_growth_rate(a_s[i], h_s[i], eta, K[i]) for i in range(nK)])
    out.prediction_errors["soca"] = err(ea_s, eh_s)
    for name, sfx in (("measured_matrix", ""), ("soca_matrix", "_soca")):
        out.predictions[name] = np.array([anisotropic_growth_rate(result.tensors["alpha_K" + sfx][i],
                                                                  result.tensors["eta_K" + sfx][i], eta, K[i], s).real
                                          for i in range(nK)])
        out.prediction_errors[name] = out.prediction_errors["measured" if not sfx else "soca"]
    alpha0 = result.uniform_alpha()
    fit = result.fits.get("eta_t", {})
    eta0 = fit.get("c0") if len(K) > 1 else None
    if eta0 is None or not math.isfinite(eta0):
        eta0 = float(h[0])
        out.notes.append("local closure: a single K, eta_t(0) taken as eta_t at the smallest K")
    out.local = {"alpha0": alpha0, "eta_t0": eta0, "eta_t0_source": fit.get("note", "") if len(K) > 1 else "smallest K",
                 "eta_t0_fit_misfit": fit.get("rms_relative_misfit")}
    out.predictions["local"] = np.array([mean_field_growth_rate(alpha0, eta0, eta, k) for k in K])
    out.prediction_errors["local"] = nan.copy()
    out.predictions["memory"], out.prediction_errors["memory"] = nan.copy(), nan.copy()
    out.predictions["memory_soca"], out.prediction_errors["memory_soca"] = nan.copy(), nan.copy()
    if plan.method == "direct":
        layout = _layout(case)
        kernels = make_kernels(layout.transforms.array_kernels, layout.transforms.threads, layout.real_dtype)
        kept = case.box.max_kept_modes[s]
        for i, n in enumerate(plan.modes):
            levels = harmonic_levels(n, periods, plan.closure_coupling, kept)
            # the last three orders: with a selection rule one order can add nothing (ABC: K couples to
            # K +- 2 k_f but not to K +- k_f), so the error is the larger change from the two before
            sets = [sum(levels[:j + 1], []) for j in range(len(levels))][-3:]
            modes = sets[-1]
            out.harmonics.append(modes)
            details = {}
            for name, soca in (("memory", False), ("memory_soca", True)):
                values = []
                for chosen in sets:
                    say(f"K = {K[i]:.4g}: {'SOCA ' if soca else ''}memory-consistent growth rate with the "
                        f"harmonics {chosen}")
                    responses = ShiftedResponses(layout, case.flow, eta, s, chosen, case.box.lengths[s],
                                                 plan.solver_tolerance, kernels, soca=soca)
                    try:
                        values.append(memory_growth_rate(responses, None if not values else values[-1]["p"]))
                    except NumericalError as exc:
                        out.notes.append(f"K = {K[i]:.4g}: {'SOCA ' if soca else ''}memory-consistent prediction not "
                                         f"defined ({exc})")
                        values = []
                        break
                if not values:
                    details[name] = None
                    continue
                last = values[-1]
                truncation = max(abs(v["p"] - last["p"]) for v in values[:-1]) if len(values) > 1 else math.nan
                out.predictions[name][i] = last["p"]
                out.prediction_errors[name][i] = last["change"] + (truncation if math.isfinite(truncation) else 0.0)
                details[name] = {**last, "harmonics": modes, "truncation": truncation}
            out.memory_details.append(details)
    else:
        out.notes.append("memory-consistent predictions need direct steady solves (a steady flow): not computed")
    out.direct, out.direct_error = nan.copy(), nan.copy()
    out.direct_share, out.direct_length = nan.copy(), nan.copy()
    if direct_run is None:
        out.notes.append("direct runs skipped: no direct run was supplied")
        return out
    for i, n in enumerate(plan.modes):
        small = shrunk_case(case, s, n) if periods % n == 0 else None
        if small is None:
            out.notes.append(f"K = {K[i]:.4g}: no direct run (no periodic box of length 2 pi/K along "
                             f"{'xyz'[s]} holds the flow)")
            continue
        say(f"K = {K[i]:.4g}: direct run in the box L_{'xyz'[s]} = {small.box.lengths[s]:.6g}, grid "
            f"{list(small.box.grid)}")
        try:
            rate, error, b_hat, caution = direct_run(small)
            if caution:
                out.notes.append(f"K = {K[i]:.4g}: direct run: {caution}")
        except NumericalError as exc:
            out.notes.append(f"K = {K[i]:.4g}: the direct run failed ({exc})")
            continue
        out.direct[i], out.direct_error[i] = rate, error
        out.direct_length[i] = small.box.lengths[s]
        out.direct_share[i] = box_scale_mean_share(b_hat, _layout(small), s) if b_hat is not None else math.nan
        if out.direct_share[i] < 0.5:
            out.notes.append(f"K = {K[i]:.4g}: the direct run's mode has {out.direct_share[i]:.2g} of its energy in "
                             "the box-scale mean field (the fluctuations hold the rest, or it is another mode)")
    return out
