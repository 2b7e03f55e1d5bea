"""Energy and shell spectra of a vector field from its Fourier coefficients.

All functions take a layout (:mod:`kindyn.layout`): local wavenumbers and Parseval weights, and
its reductions, so that a distributed layout gives the same spectrum as a serial one.

``E = <|B|^2>/2`` (volume average). The shell spectrum sums ``|b_hat|^2/2`` (Parseval weights)
over shells ``|k| in [(s - 1/2) dk, (s + 1/2) dk)`` with ``dk = 2 pi / max(L)``, so that
``sum_s E_s = E``. Shell ``s`` is centred on ``k_s = s dk``.
"""

from __future__ import annotations

import numpy as np



def energy(b_hat: np.ndarray, layout) -> float:
    """Magnetic energy ``<|B|^2>/2``."""
    return layout.energy(b_hat)


def shell_indices(layout) -> np.ndarray:
    """Integer shell index of every local mode."""
    dk = layout.smallest_wavenumber
    return np.rint(np.sqrt(layout.k_squared) / dk).astype(int)


def shell_count(layout) -> int:
    """Number of shells of the whole grid (the same on every process)."""
    k_max = np.sqrt(sum((2 * np.pi * (n // 2) / L) ** 2 for n, L in zip(layout.grid, layout.lengths)))
    return int(np.rint(k_max / layout.smallest_wavenumber)) + 1


def shell_spectrum(b_hat: np.ndarray, layout) -> tuple[np.ndarray, np.ndarray]:
    """``(k_s, E_s)``: shell wavenumbers and energy per shell (sums to :func:`energy`)."""
    shells = np.broadcast_to(shell_indices(layout), layout.spectral_shape)
    density = 0.5 * layout.parseval_weights * sum(c.real**2 + c.imag**2 for c in b_hat)
    spectrum = layout.total(np.bincount(shells.ravel(), weights=density.ravel(), minlength=shell_count(layout)))
    return np.arange(spectrum.size) * layout.smallest_wavenumber, spectrum


def cutoff_ratio(b_hat: np.ndarray, layout, axes=(0, 1, 2)) -> float:
    """Energy in the last fully kept shell over the largest shell energy.

    The last fully kept shell is the largest ``k_s`` not above the smallest 2/3-rule cut-off
    wavenumber of the ``axes`` considered. A ratio that is not small (default threshold 0.03, run.resolution_threshold) means the field has structure
    the grid cannot hold: under-resolved runs can show spurious growth. Leave out an axis along
    which the flow is uniform (``axes=(0, 1)`` for a z-independent flow): its Fourier sectors are
    decoupled, each exact, and a grid keeping only ``kz = 0, +-2 pi/Lz`` is then not under-resolved.
    """
    k, spectrum = shell_spectrum(b_hat, layout)
    k_cut = min(layout.max_kept_wavenumbers[i] for i in axes)
    last = int(np.floor(k_cut / layout.smallest_wavenumber + 1e-9))
    peak = spectrum[1:].max() if spectrum.size > 1 else 0.0
    if peak <= 0 or last < 1:
        return 0.0
    return float(spectrum[min(last, spectrum.size - 1)] / peak)


def resolution_caution(ratio: float, threshold: float, what: str = "magnetic spectrum") -> str:
    """The sentence shown when :func:`cutoff_ratio` exceeds the case's threshold."""
    return (f"the {what} at the dealiasing cut-off is {ratio:.2g} of its peak (threshold {threshold:g}): "
            "the grid may be too coarse, and under-resolved runs can show spurious growth; "
            "repeat on a finer grid")
