"""What flow did the user get: rms speed, helicity, spectra, divergence and SOCA estimates.

Inputs are the velocity on the grid ``u (3, nx, ny, nz)`` and its Fourier coefficients
``u_hat (3, nx, ny, nz//2+1)`` (``u = sum u_hat e^{ik.x}``, the convention of :mod:`kindyn.box`).
Volume averages ``<.>`` are computed by Parseval with the half-grid weights ``w``.

* ``u_rms = sqrt(<|u|^2>)``, ``omega_rms = sqrt(<|omega|^2>)`` with ``omega = curl u``;
* kinetic helicity ``<u . omega>`` and relative helicity ``<u . omega>/(u_rms omega_rms)`` in [-1, 1];
* shell spectra (shells of :mod:`kindyn.diagnostics.spectra`): ``E_s`` sums ``w |u_hat|^2/2`` and
  ``H_s`` sums ``w Re(conj(u_hat) . omega_hat)``, so ``sum E_s = <|u|^2>/2``, ``sum H_s = <u.omega>``;
* relative divergence ``||div u||/||grad u||`` (:func:`kindyn.flows.checks.relative_divergence`);
* SOCA for a steady flow (Moffatt 1978, *Magnetic Field Generation in Electrically Conducting
  Fluids*, CUP, ch. 7; design.md section 1), summed mode by mode instead of over shells::

      alpha = -(1/(3 eta)) Int H(k)/k^2 dk = -(1/(3 eta)) sum_k w Re(conj(u_hat) . omega_hat)/|k|^2
      eta_t =  (1/(3 eta)) Int 2E(k)/k^2 dk =  (1/(3 eta)) sum_k w |u_hat|^2/|k|^2

  (the k = 0 mean flow is left out: a uniform flow only sweeps the field). These are the isotropic
  parts (one third of the trace) of the SOCA tensors; they hold for ``Rm << 1`` (SOCA drops
  ``curl(u x b - <u x b>)``) and do not apply to time-dependent flows.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kindyn.calculus import curl_hat
from kindyn.diagnostics.spectra import shell_indices
from kindyn.flows.checks import band_fraction, relative_divergence


@dataclass(frozen=True)
class FlowStatistics:
    u_rms: float
    max_speed: float
    mean_flow: float            # |<u>|
    helicity: float             # <u . omega>
    omega_rms: float
    relative_helicity: float
    divergence: float           # ||div u|| / ||grad u||
    band_fraction: float        # share of <|u|^2> outside the 2/3-rule band
    wavenumbers: np.ndarray     # shell centres k_s
    energy_spectrum: np.ndarray  # E_s, sum = <|u|^2>/2
    helicity_spectrum: np.ndarray  # H_s, sum = <u . omega>
    alpha_soca: float
    eta_t_soca: float


def shell_spectra(u_hat: np.ndarray, box) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(k_s, E_s, H_s)``: energy and helicity per shell (see the module docstring)."""
    w = box.parseval_weights
    omega_hat = curl_hat(u_hat, box)
    energy = 0.5 * w * sum(np.abs(c) ** 2 for c in u_hat)
    helicity = w * sum((np.conj(a) * b).real for a, b in zip(u_hat, omega_hat))
    shells = shell_indices(box).ravel()
    count = int(shells.max()) + 1
    E = np.bincount(shells, weights=energy.ravel(), minlength=count)
    H = np.bincount(shells, weights=helicity.ravel(), minlength=count)
    return np.arange(count) * box.smallest_wavenumber, E, H


def soca_coefficients(u_hat: np.ndarray, box, eta: float) -> tuple[float, float]:
    """Steady-flow SOCA ``(alpha, eta_t)`` mode by mode (module docstring; Moffatt 1978, ch. 7)."""
    w = box.parseval_weights
    k2 = np.where(box.k_squared == 0, np.inf, box.k_squared)  # the mean flow does not contribute
    omega_hat = curl_hat(u_hat, box)
    helicity = w * sum((np.conj(a) * b).real for a, b in zip(u_hat, omega_hat))
    energy2 = w * sum(np.abs(c) ** 2 for c in u_hat)  # 2 E per mode
    alpha = -float(np.sum(helicity / k2)) / (3.0 * eta)
    eta_t = float(np.sum(energy2 / k2)) / (3.0 * eta)
    return alpha, eta_t


def flow_statistics(u: np.ndarray, u_hat: np.ndarray, box, eta: float) -> FlowStatistics:
    """Every number of the module docstring for one snapshot."""
    w = box.parseval_weights
    omega_hat = curl_hat(u_hat, box)
    u_ms = float(np.sum(w * sum(np.abs(c) ** 2 for c in u_hat)))
    omega_ms = float(np.sum(w * sum(np.abs(c) ** 2 for c in omega_hat)))
    helicity = float(np.sum(w * sum((np.conj(a) * b).real for a, b in zip(u_hat, omega_hat))))
    u_rms, omega_rms = math.sqrt(u_ms), math.sqrt(omega_ms)
    relative = helicity / (u_rms * omega_rms) if u_rms > 0 and omega_rms > 0 else 0.0
    k, E, H = shell_spectra(u_hat, box)
    alpha, eta_t = soca_coefficients(u_hat, box, eta)
    return FlowStatistics(
        u_rms=u_rms,
        max_speed=float(np.sqrt(np.max(np.sum(u**2, axis=0)))),
        mean_flow=float(np.linalg.norm(u_hat[:, 0, 0, 0].real)),
        helicity=helicity,
        omega_rms=omega_rms,
        relative_helicity=float(relative),
        divergence=relative_divergence(u_hat, box),
        band_fraction=band_fraction(u_hat, box),
        wavenumbers=k, energy_spectrum=E, helicity_spectrum=H,
        alpha_soca=alpha, eta_t_soca=eta_t)


def time_dependence(flow) -> tuple[str, float | None, str]:
    """``(kind, correlation time or None, note)`` for the flow's declared time dependence."""
    if flow.steady:
        return "steady", None, ""
    if getattr(flow, "renewal_time", None):
        tau_c = getattr(flow, "correlation_time", None) or 0.5 * flow.renewal_time
        return "renovating", tau_c, (f"renewed every tau = {flow.renewal_time:g}; velocity correlation "
                                     f"1 - |s|/tau, integral time tau/2 = {tau_c:g}")
    if getattr(flow, "correlation_time", None):
        return "correlated", flow.correlation_time, (f"Ornstein-Uhlenbeck amplitudes, correlation time "
                                                     f"{flow.correlation_time:g}")
    if getattr(flow, "period", None):
        return "periodic", None, f"time-periodic with period {flow.period:g}"
    return "time-dependent", None, "time-dependent; correlation time not known to kindyn"
