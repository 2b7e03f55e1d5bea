"""The growth estimator (kindyn.diagnostics.growth) on synthetic linear records with known ``p``.

A record is what a linear run produces: a state ``x(t) = sum_n Re(c_n v_n exp(p_n t))`` (random
seeded vectors ``v_n``) sampled every ``dt``, renormalised to unit energy at every sample with the
removed log-amplitude kept (as kindyn.run does), the energy ``E = |x|^2/2`` and probe vectors. For a
single oscillatory mode ``E = e^{2 gamma t}(a + b cos(2 omega t + phi))`` (exact). Checks: the
estimate of ``gamma = max Re p`` and of ``omega``, the ``converged`` flag is never set on a wrong
answer, and the reported uncertainty covers the true error at every stage of the record.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from kindyn.diagnostics.growth import estimate_growth, snapshot_eigenvalue

DT = 0.25


def record(modes, samples: int, dt: float = DT, dim: int = 60, seed: int = 1, renormalise: bool = True):
    """``(times, ln E, probes, log_amplitudes)`` of ``x(t) = sum amp Re(v e^{pt})``."""
    rng = np.random.default_rng(seed)
    t = np.arange(samples) * dt
    x = np.zeros((samples, dim))
    for amplitude, p in modes:
        v = rng.standard_normal(dim) + (1j * rng.standard_normal(dim) if p.imag else 0)
        x += amplitude * np.real(v[None, :] * np.exp(p * t)[:, None])
    log_energy = np.log(0.5 * np.sum(x**2, axis=1))
    log_amplitude = np.zeros(samples)
    if renormalise:  # as kindyn.run: probes of the renormalised field + the removed log-amplitude
        log_amplitude = 0.5 * log_energy
        x = x / np.exp(log_amplitude)[:, None]
    return t, log_energy, x, log_amplitude


SIGNALS = {  # name: (modes [(amplitude, p)], tolerance)
    "real": ([(1.0, 0.05 + 0j)], 1e-6),
    "oscillatory": ([(1.0, 0.01 + 0.6j)], 1e-6),
    "fast-oscillatory": ([(1.0, -0.02 + 3.0j)], 1e-6),
    "with-subdominant": ([(1.0, 0.02 + 0.3j), (1.0, -0.05 + 1.1j)], 1e-5),
    "close-pair": ([(1.0, 0.02 + 0j), (3.0, 0.0 + 0j)], 1e-5),  # contamination decays slowly
    "subdominant-dominant-at-first": ([(0.01, 0.008 + 0.62j), (1.0, -0.08 + 0.2j)], 1e-5),
}


def true_mode(modes):
    gamma, p = max((p.real, p) for _, p in modes)
    return gamma, abs(p.imag)


@pytest.mark.parametrize("name", sorted(SIGNALS))
def test_estimate_on_growing_records(name):
    modes, tolerance = SIGNALS[name]
    gamma, omega = true_mode(modes)
    t, log_energy, probes, log_amp = record(modes, 3200)
    seen_converged = False
    for m in range(40, 3201, 40):  # the record as the run sees it while it grows
        e = estimate_growth(t[:m], log_energy[:m], probes[:m], log_amp[:m], tolerance=tolerance)
        if not math.isfinite(e.growth_rate):
            assert not e.converged
            continue
        true_error = abs(e.growth_rate - gamma)
        assert true_error <= e.error + 1e-14, (m, e)  # the uncertainty covers the true error
        if e.converged:
            seen_converged = True
            assert e.error <= tolerance
            assert true_error <= tolerance
    assert seen_converged
    final = estimate_growth(t, log_energy, probes, log_amp, tolerance=tolerance)
    assert final.converged
    assert final.growth_rate == pytest.approx(gamma, abs=tolerance)
    assert final.frequency == pytest.approx(omega, abs=1e-6)


def test_frequency_is_not_aliased_on_long_records():
    # omega = 3 with samples every 0.25: resolvable (Nyquist 4 pi); a long record must not thin the
    # snapshots so far that omega aliases (the energy fit then uses the wrong harmonics)
    t, log_energy, probes, log_amp = record([(1.0, 0.01 + 3.0j)], 6000)
    e = estimate_growth(t, log_energy, probes, log_amp, tolerance=1e-6)
    assert e.frequency == pytest.approx(3.0, rel=1e-8)
    assert e.growth_rate == pytest.approx(0.01, abs=1e-8)


def test_renormalisation_is_undone():
    # the same state with and without per-sample renormalisation gives the same eigenvalue
    modes = [(1.0, 0.03 + 0.7j), (0.5, -0.02 + 0.1j)]
    a = record(modes, 400, renormalise=True)
    b = record(modes, 400, renormalise=False)
    pa = snapshot_eigenvalue(a[0][-160:], a[2][-160:], a[3][-160:])
    pb = snapshot_eigenvalue(b[0][-160:], b[2][-160:], b[3][-160:])
    assert pa == pytest.approx(pb, rel=1e-9)
    assert pa == pytest.approx(0.03 + 0.7j, rel=1e-9)


def test_short_record_is_never_converged():
    t, log_energy, probes, log_amp = record([(1.0, 0.05 + 0j)], 20)
    e = estimate_growth(t, log_energy, probes, log_amp, tolerance=1.0)
    assert not e.converged and not math.isfinite(e.error)


def test_too_few_oscillations_is_not_converged():
    # omega = 0.12 over a trailing window of 40 time units: 1.5 energy oscillations (period
    # pi/omega), resolvable (omega > pi/40) but fewer than two: never converged, whatever the tolerance
    t, log_energy, probes, log_amp = record([(1.0, 0.01 + 0.12j)], 321)
    e = estimate_growth(t, log_energy, probes, log_amp, tolerance=1.0)
    assert e.frequency == pytest.approx(0.12, rel=1e-6)
    assert 1 < e.frequency * (e.window[1] - e.window[0]) / math.pi < 2
    assert not e.converged and "oscillations" in e.note
    t, log_energy, probes, log_amp = record([(1.0, 0.01 + 0.12j)], 641)  # 3 oscillations: converged
    assert estimate_growth(t, log_energy, probes, log_amp, tolerance=1e-6).converged
