"""Initial magnetic fields (spectral, dealiased, solenoidal) and the probes of the snapshot fit.

The random field is the curl of a seeded Gaussian vector potential, filtered with the spectrum
profile ``|b_hat(k)| ~ (k/k_0) exp(-(k/k_0)^2)`` so that its energy peaks near ``k_0``; it has zero
mean (``b_hat(0) = 0``), is exactly solenoidal, lies in the 2/3-rule band and has unit energy.
Same seed, same grid and box: the same field (numpy Generator, no global state).

Every function takes the layout (:mod:`kindyn.layout`) that holds the field.
"""

from __future__ import annotations

import numpy as np

from kindyn.calculus import curl_hat


def random_field_hat(layout, seed: int, peak_wavenumber: float) -> np.ndarray:
    """Unit-energy random initial field (see module docstring); complex spectral array ``(3, *spectral_shape)``."""
    rng = np.random.default_rng(seed)
    potential_hat = layout.spectral_from_physical(layout.standard_normal(rng, 3))
    k = np.sqrt(layout.k_squared)
    profile = np.exp(-((k / peak_wavenumber) ** 2)) * layout.dealias_mask
    profile[profile < 1e-30] = 0.0  # no subnormal numbers: they slow every transform that touches them
    b_hat = curl_hat(potential_hat * profile, layout)
    if layout.uniform_mode is not None:
        b_hat[(slice(None), *layout.uniform_mode)] = 0
    return b_hat / np.sqrt(layout.energy(b_hat))


def flow_field_hat(layout, flow, t: float = 0.0) -> np.ndarray:
    """``B = u(t)`` on the dealiased band (used by exact tests: for a Beltrami flow it only decays)."""
    b_hat = layout.spectral_from_physical(layout.sample_velocity(flow, t).astype(layout.real_dtype))
    b_hat = b_hat * layout.dealias_mask
    return b_hat / np.sqrt(layout.energy(b_hat))


def probe_indices(layout, count: int = 96, seed: int = 20261201) -> np.ndarray:
    """Flat indices (into one component of the whole half grid) of the probe modes.

    The lowest kept modes (``|m_i| <= 2``) plus a seeded random choice of other kept modes, so that
    every mode structure projects on the probes. Chosen on the whole grid, so that every layout of
    the same box picks the same probes (:meth:`kindyn.layout.BoxLayout.probe_vector` reads them).
    """
    from kindyn.layout import BoxLayout

    whole = BoxLayout(layout.box)
    mx, my, mz = whole.mode_numbers
    kept = np.broadcast_to(whole.dealias_mask, whole.spectral_shape)
    low = kept & (np.abs(mx) <= 2) & (np.abs(my) <= 2) & (mz <= 2)
    flat_low = np.flatnonzero(low)
    others = np.setdiff1d(np.flatnonzero(kept), flat_low)
    rng = np.random.default_rng(seed)
    extra = rng.choice(others, size=min(count, others.size), replace=False) if others.size else others
    return np.sort(np.concatenate([flat_low, extra]))


def probe_vector(b_hat: np.ndarray, indices: np.ndarray, layout) -> np.ndarray:
    """Real probe vector: real and imaginary parts of the probe coefficients of all components."""
    return layout.probe_vector(b_hat, indices)
