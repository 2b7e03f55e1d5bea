"""Ranges that need the built box and flow: a grid that holds the flow and the 2/3 band, and a
diffusivity whose decay the arithmetic can follow.

The section converters (:mod:`kindyn.case.schema`) already keep every number finite and between
1e-100 and 1e100; what is checked here needs the box or the flow's declared scales ``U``, ``k_f``:

* **the band holds a field**: at least one axis keeps mode 1 after the 2/3 rule (4 points or
  more); otherwise the only kept mode is ``k = 0``, which runs leave out (the grid ``[1, 1, 1]``);
* **the grid resolves the flow**: ``k_f`` is at most the largest kept ``|k|``, and at least
  :data:`MAX_SCALE_RATIO` times smaller than it (a flow scale far beyond the box makes the CFL step
  ``~ 1/(U k_max)`` a vanishing fraction of the turnover time ``1/(U k_f)``: ``1e-300`` box lengths
  gave a run that stepped with ``dt ~ 1e-300`` for ever);
* **the decay is representable**: between two samples of a growth run (or over one propagation of
  the eigen-solver) the slowest kept mode decays by ``exp(-2 eta k_min^2 tau)``; if that underflows
  (``eta k_min^2 tau`` above :data:`MAX_DECAY_EXPONENT`, or 40 in single precision) the energy
  becomes 0 and the run could only fail with a misleading numerical error (``magnetic.Rm = 1e-20``,
  ``eta = 1e300``). The message gives the smallest Rm (largest eta) that works.
"""

from __future__ import annotations

import math

from kindyn.errors import CaseError
from kindyn.limits import MAX_INTEGER

MAX_SCALE_RATIO = 1e5
MAX_DECAY_EXPONENT = {"double": 300.0, "single": 40.0}
SAMPLES_PER_PERIOD = 8  # kindyn.timestep.SAMPLES_PER_PERIOD
SAMPLE_TURNOVERS = 0.25  # default sample interval, in turnover times 1/(U k_f) (kindyn.timestep)


def check_band(box, file: str, key: str = "domain.grid") -> None:
    """The 2/3-rule band of ``box`` must hold more than the uniform mode."""
    if max(box.max_kept_modes) < 1:
        raise CaseError(file, key, list(box.grid),
                        "a grid whose 2/3-rule band holds a field: at least 4 points along one axis "
                        "(n points keep the modes |m| < n/3; here only k = 0 is kept)")


def kept_wavenumber_range(box) -> tuple[float, float]:
    """(smallest non-zero kept ``|k|``, largest kept ``|k|``) of ``box``."""
    lows = [2 * math.pi / L for L, m in zip(box.lengths, box.max_kept_modes) if m >= 1]
    high = math.sqrt(sum(k * k for k in box.max_kept_wavenumbers))
    return (min(lows) if lows else math.inf), high


def check_flow_scale(box, flow, file: str) -> None:
    """The flow's ``k_f`` lies in the band of ``box`` (see module docstring)."""
    k_f, U = float(flow.wavenumber), float(flow.speed)
    if not (math.isfinite(k_f) and k_f > 0 and math.isfinite(U) and U > 0):
        return  # resolve_diffusivity refuses these with its own message
    _, high = kept_wavenumber_range(box)
    if k_f > high * (1 + 1e-9):
        raise CaseError(file, "domain.grid", list(box.grid),
                        f"a grid that resolves the flow's wavenumber k_f = {k_f:.6g}: the largest |k| this grid "
                        f"keeps after dealiasing is {high:.6g}")
    if high > MAX_SCALE_RATIO * k_f:
        raise CaseError(file, "domain.lengths", list(box.lengths),
                        f"a box on the scale of the flow: the largest kept |k| = {high:.3g} is more than "
                        f"{MAX_SCALE_RATIO:.0e} times the flow's k_f = {k_f:.3g}, so that a time step would be a "
                        "vanishing fraction of the turnover time 1/(U k_f)")


def _period(flow) -> float | None:
    period = getattr(flow, "period", None) or getattr(flow, "renewal_time", None)
    return float(period) if period and math.isfinite(period) and period > 0 else None


def decay_interval(config, flow, purpose: str) -> tuple[float, str] | None:
    """The longest time between two renormalisations for ``purpose`` and what sets it (None: no
    renormalised series, e.g. test fields or flow statistics)."""
    turnover = 1.0 / (float(flow.speed) * float(flow.wavenumber))
    period = _period(flow)
    if purpose == "sweep":
        purpose = "modes" if config.sweep and config.sweep.method == "modes" else "run"
    if purpose == "modes":
        if period and not getattr(flow, "steady", False):
            return period, "the flow period (one Floquet propagation)"
        if config.modes.propagation_time:
            return config.modes.propagation_time, "modes.propagation_time"
        return turnover, "the propagation time 1/(U k_f)"
    if purpose != "run":
        return None
    if period:
        return period / SAMPLES_PER_PERIOD, "the sample interval (period / 8)"
    if config.run.sample_interval:
        return config.run.sample_interval, "run.sample_interval"
    return SAMPLE_TURNOVERS * turnover, "the sample interval 0.25/(U k_f)"


def check_decay(config, box, flow, eta: float, Rm: float, purpose: str) -> None:
    """Refuse a diffusivity whose decay between two samples underflows (see module docstring)."""
    magnetic = config.magnetic
    key = "magnetic.Rm" if magnetic.Rm is not None else "magnetic.eta"
    value = magnetic.Rm if magnetic.Rm is not None else magnetic.eta
    if not (math.isfinite(eta) and eta > 0 and math.isfinite(Rm) and Rm > 0):
        raise CaseError(config.path, key, value, "a value that gives a finite, positive eta and Rm "
                        f"(here eta = {eta:.3g}, Rm = {Rm:.3g})")
    found = decay_interval(config, flow, purpose)
    low, _ = kept_wavenumber_range(box)
    if found is None or not math.isfinite(low):
        return
    tau, what = found
    limit = MAX_DECAY_EXPONENT.get(config.numerics.precision, 40.0)
    exponent = eta * low * low * tau
    if exponent > limit:
        largest_eta = limit / (low * low * tau)
        smallest_Rm = Rm * eta / largest_eta
        bound = f"Rm >= {smallest_Rm:.3g}" if key == "magnetic.Rm" else f"eta <= {largest_eta:.3g}"
        raise CaseError(config.path, key, value,
                        f"{bound} for this flow and box: otherwise the field decays by more than "
                        f"exp(-{2 * limit:.0f}) over {what} = {tau:.3g} and its energy underflows "
                        f"(eta k_min^2 tau = {exponent:.3g})")


def check_seed_span(file: str, first_seed: int, count: int, count_key: str) -> None:
    """Realisations use flow seeds ``first_seed .. first_seed + count - 1``, stored as signed 64-bit
    integers: the last must stay below 2**63 (``count_key`` names where ``count`` came from)."""
    if first_seed + count - 1 > MAX_INTEGER:
        raise CaseError(file, "flow.seed", first_seed, f"a seed at most {MAX_INTEGER - count + 1} for {count_key} "
                        f"(the last realisation's seed must stay below 2**63)")
