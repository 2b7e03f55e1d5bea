"""Random helical flows: Gaussian ensembles of helical Fourier modes with a prescribed spectrum.

The velocity is a finite sum over the lattice wavevectors ``k = 2 pi m / L`` of the box in a band
``k_min <= |k| <= k_max``::

    u(x, t) = sum_k c_k(t) exp(i k.x),   c_{-k} = conj(c_k),
    c_k = a+_k h+(k) + a-_k h-(k),       h+- = (e1 +- i e2)/sqrt(2),

with ``(e1, e2, k/|k|)`` a right-handed orthonormal triad, so that ``i k x h+- = +-|k| h+-``: each
``h+`` mode is maximally right-handed (``omega = +|k| u``), each ``h-`` mode left-handed, and every
mode is solenoidal (``k . h+- = 0``). The amplitudes are independent complex Gaussians with
``<|a+-_k|^2> = e(k) (1 +- sigma)/2``, so ``sigma`` in [-1, 1] is the relative helicity of every mode
(``<H(k)> = sigma 2 |k| <E(k)>``; sigma = 1 on one sphere |k| = k gives ``curl u = k u`` exactly).

Spectrum (``spectrum`` key). Modes are grouped in shells of width ``dk = 2 pi / max(L)`` as in
:mod:`kindyn.diagnostics.spectra` (shell ``s = rint(|k|/dk)``, centre ``k_s = s dk``). The expected
energy of shell ``s`` is proportional to ``E(k_s)``, shared equally by its modes in the band:

* ``"shell"``: every mode in the band has the same expected energy (random waves on a shell);
* ``"power-law"``: ``E(k) ~ k**slope``;
* ``"table"``: ``E(k)`` interpolated linearly in ``table_k, table_E`` (band = the table's range).

Each field is normalised to ``<|u|^2> = u_rms**2`` exactly (per realisation and at every time), so
the sampled spectrum and helicity fluctuate around the requested ones by sampling error only.
Declared scales: ``U = u_rms`` and ``k_f`` the energy-weighted mean ``|k|`` of the requested
spectrum (both seed-independent, so ``Rm = u_rms/(eta k_f)`` is the same for every realisation).

Time dependence (``time_dependence`` key; realisations from ``numpy.random.Generator`` keyed by
``SeedSequence([seed, stream, index])``, never global state; the mode list and its order depend on
the band and box lengths only, so the same seed gives the same flow on any grid that keeps it):

* ``"steady"``: one draw.
* ``"renovating"`` (renewal time ``tau``): on ``n tau <= t < (n+1) tau`` the field is realisation
  ``n = floor(t/tau)`` (``t/tau`` within 1e-9 of a whole number is rounded to it, so round-off in
  ``t`` never selects the previous interval). ``renewal = "redraw"`` draws new amplitudes,
  ``"shift"`` translates the first draw by a random vector, ``"redraw-shift"`` does both.
  At an interval boundary the velocity is the new realisation; the stepper evaluates every stage
  of a step inside the step's renewal interval (``constant_between`` of
  :class:`~kindyn.stepping.IntegratingFactorStepper`), so each step sees one realisation only.
* ``"ornstein-uhlenbeck"`` (correlation time ``tau``): every amplitude is an OU process
  ``da = -a dt/tau + sqrt(2/tau) s dW`` with stationary variance ``s^2``, started from its stationary
  law. The path is sampled exactly on a fine grid ``t_i = i tau/OU_STEPS_PER_TAU`` (``a_{i+1} =
  rho a_i + sqrt(1 - rho^2) s xi_i``, ``rho = exp(-1/OU_STEPS_PER_TAU)``) and interpolated linearly
  in between, so ``u(t)`` is a continuous, pure function of ``t``. The noise ``xi`` of fine-step
  block ``b`` comes from its own keyed Generator, and the states at block starts are cached: the
  value at ``t`` never depends on the order of calls.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from kindyn.errors import MISSING, ParameterError
from kindyn.flows.base import finite, positive
from kindyn.limits import MAX_INTEGER

SPECTRA = ("shell", "power-law", "table")
TIME_MODELS = ("steady", "renovating", "ornstein-uhlenbeck")
RENEWALS = ("redraw", "shift", "redraw-shift")
OU_STEPS_PER_TAU = 64
OU_BLOCK = 256
MAX_MODES = 200_000
_STREAM_DRAW, _STREAM_SHIFT, _STREAM_OU = 1, 2, 3
MAX_SLOPE = 50.0  # E(k) ~ k**slope: beyond this the shell energies over- or underflow
_KEYS = ("spectrum", "k_min", "k_max", "slope", "table_k", "table_E", "sigma", "u_rms", "seed",
         "time_dependence", "tau", "renewal")


# --- the mode set and the helical basis -------------------------------------------------------

def band_modes(lengths, k_min: float, k_max: float) -> np.ndarray:
    """Integer mode numbers ``(M, 3)`` of one of each pair ``+-k`` with ``k_min <= |k| <= k_max``.

    Representatives have ``m_z > 0``, or ``m_z = 0, m_y > 0``, or ``m_z = m_y = 0, m_x > 0``;
    sorted lexicographically (independent of the grid).
    """
    reach = [int(math.floor(k_max * L / (2 * math.pi) + 1e-9)) for L in lengths]
    count = np.prod([2 * r + 1 for r in reach])
    if count > 50 * MAX_MODES:
        raise ParameterError("k_max", k_max, f"a band with at most {MAX_MODES} modes")
    axes = [np.arange(-r, r + 1) for r in reach]
    m = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
    k = 2 * math.pi * m / np.asarray(lengths)
    norm = np.sqrt((k**2).sum(axis=1))
    tol = 1e-9 * max(1.0, k_max)
    inside = (norm >= k_min - tol) & (norm <= k_max + tol) & (norm > 0)
    mx, my, mz = m.T
    upper = (mz > 0) | ((mz == 0) & (my > 0)) | ((mz == 0) & (my == 0) & (mx > 0))
    return m[inside & upper]


def helical_basis(k: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``h+``, ``h-`` (each ``(M, 3)`` complex) for wavevectors ``k (M, 3)``: ``i k x h+- = +-|k| h+-``."""
    khat = k / np.linalg.norm(k, axis=1, keepdims=True)
    ref = np.where(np.abs(khat[:, 2:3]) < 0.9, [[0.0, 0.0, 1.0]], [[0.0, 1.0, 0.0]])
    e1 = np.cross(khat, ref)
    e1 /= np.linalg.norm(e1, axis=1, keepdims=True)
    e2 = np.cross(khat, e1)
    return (e1 + 1j * e2) / math.sqrt(2), (e1 - 1j * e2) / math.sqrt(2)


def shell_weights(norms: np.ndarray, dk: float, spectrum: str, slope: float,
                  table_k, table_E) -> np.ndarray:
    """Expected energy of each mode (unnormalised): ``E(k_s)`` shared by the modes of shell ``s``."""
    shells = np.rint(norms / dk).astype(int)
    centres = shells * dk
    if spectrum == "shell":
        return np.ones_like(norms)
    if spectrum == "power-law":
        energy = centres.astype(float) ** slope
    else:
        energy = np.interp(centres, table_k, table_E, left=0.0, right=0.0)
    counts = np.bincount(shells)
    return energy / counts[shells]


# --- the flow -----------------------------------------------------------------------------------

@dataclass(frozen=True)
class RandomHelicalFlow:
    """A seeded Gaussian ensemble member of helical modes (see the module docstring for the keys)."""

    spectrum: str = "shell"
    k_min: float = 1.0
    k_max: float = 2.0
    slope: float = -5.0 / 3.0
    table_k: tuple = ()
    table_E: tuple = ()
    sigma: float = 1.0
    u_rms: float = 1.0
    seed: int = 1
    time_dependence: str = "steady"
    tau: float | None = None
    renewal: str = "redraw"
    lengths: tuple = (2 * math.pi,) * 3
    box: object = field(default=None, repr=False, compare=False)
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    # --- construction and validation -----------------------------------------------------------
    @classmethod
    def from_case(cls, params: dict, box, case_dir="."):
        for key, value in params.items():
            if key not in _KEYS:
                raise ParameterError(key, value, "a parameter of the random-helical flow: " + ", ".join(_KEYS))
        p = dict(params)
        for key in ("table_k", "table_E"):
            if key in p:
                if not isinstance(p[key], (list, tuple)):
                    raise ParameterError(key, p[key], "a list of numbers")
                p[key] = tuple(p[key])
        return cls(**p, lengths=tuple(box.lengths), box=box)

    def __post_init__(self):
        if self.spectrum not in SPECTRA:
            raise ParameterError("spectrum", self.spectrum, "one of " + ", ".join(f'"{s}"' for s in SPECTRA))
        if self.spectrum == "table":
            self._check_table()
        else:
            positive("k_min", self.k_min)
            positive("k_max", self.k_max)
            if self.k_max < self.k_min:
                raise ParameterError("k_max", self.k_max, f"a number >= k_min = {self.k_min:g}")
            finite("slope", self.slope)
            if abs(self.slope) > MAX_SLOPE:  # k**slope must stay finite for every |k| of a grid
                raise ParameterError("slope", self.slope, f"a spectral slope between -{MAX_SLOPE:g} and {MAX_SLOPE:g}")
        finite("sigma", self.sigma)
        if not -1.0 <= self.sigma <= 1.0:
            raise ParameterError("sigma", self.sigma, "a relative helicity in [-1, 1]")
        positive("u_rms", self.u_rms)
        if isinstance(self.seed, bool) or not isinstance(self.seed, int) or not 0 <= self.seed <= MAX_INTEGER:
            raise ParameterError("seed", self.seed, "a whole number from 0 to 2**63 - 1")
        if self.time_dependence not in TIME_MODELS:
            raise ParameterError("time_dependence", self.time_dependence, "one of " + ", ".join(f'"{s}"' for s in TIME_MODELS))
        if self.time_dependence == "steady":
            if self.tau is not None:
                raise ParameterError("tau", self.tau, "no tau for a steady flow (time_dependence = \"steady\")")
        else:
            if self.tau is None:
                raise ParameterError("tau", MISSING, f"a correlation or renewal time tau > 0 for time_dependence = "
                                     f"\"{self.time_dependence}\"")
            positive("tau", self.tau)
        if self.renewal not in RENEWALS:
            raise ParameterError("renewal", self.renewal, "one of " + ", ".join(f'"{s}"' for s in RENEWALS))
        modes = band_modes(self.lengths, self.band[0], self.band[1])
        if modes.shape[0] == 0:
            raise ParameterError("k_max", self.band[1], f"a band [{self.band[0]:g}, {self.band[1]:g}] "
                                 "that contains at least one wavevector of the box")
        if modes.shape[0] > MAX_MODES:
            raise ParameterError("k_max", self.band[1], f"a band with at most {MAX_MODES} modes "
                                 f"(this one has {modes.shape[0]})")
        k = 2 * math.pi * modes / np.asarray(self.lengths)
        norms = np.linalg.norm(k, axis=1)
        weights = shell_weights(norms, 2 * math.pi / max(self.lengths), self.spectrum, self.slope,
                                self.table_k, self.table_E)
        if not np.any(weights > 0):
            raise ParameterError("table_E", self.table_E, "a spectrum with energy in the band")
        h_plus, h_minus = helical_basis(k)
        self._cache.update(modes=modes, k=k, norms=norms, weights=weights / weights.sum(),
                           h_plus=h_plus, h_minus=h_minus, realisations={})

    def _check_table(self):
        tk, tE = self.table_k, self.table_E
        if len(tk) < 2 or len(tk) != len(tE):
            raise ParameterError("table_k", list(tk), "at least two wavenumbers, as many as table_E values")
        for key, values in (("table_k", tk), ("table_E", tE)):
            for v in values:
                if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                    raise ParameterError(key, list(values), "a list of finite numbers")
        if tk[0] <= 0 or any(b <= a for a, b in zip(tk, tk[1:])):
            raise ParameterError("table_k", list(tk), "positive, strictly increasing wavenumbers")
        if any(v < 0 for v in tE):
            raise ParameterError("table_E", list(tE), "non-negative spectrum values")

    @property
    def band(self) -> tuple[float, float]:
        if self.spectrum == "table":
            return float(self.table_k[0]), float(self.table_k[-1])
        return float(self.k_min), float(self.k_max)

    # --- the flow protocol ---------------------------------------------------------------------
    @property
    def speed(self) -> float:
        return float(self.u_rms)

    @property
    def wavenumber(self) -> float:
        c = self._cache
        return float(np.dot(c["weights"], c["norms"]))

    @property
    def steady(self) -> bool:
        return self.time_dependence == "steady"

    @property
    def stochastic(self) -> bool:
        return self.time_dependence != "steady"

    period = None
    z_independent = False
    scale_rule = ("declared by the random-helical flow type: U = u_rms (the normalisation), k_f = energy-weighted "
                  "mean |k| of the requested spectrum")

    @property
    def renewal_time(self) -> float | None:
        return self.tau if self.time_dependence == "renovating" else None

    @property
    def correlation_time(self) -> float | None:
        """Integral time of the velocity autocorrelation: ``tau`` (OU), ``tau/2`` (renovating:
        ``C(s) = 1 - |s|/tau`` averaged over the renewal phase), ``None`` when steady."""
        if self.time_dependence == "ornstein-uhlenbeck":
            return self.tau
        return 0.5 * self.tau if self.time_dependence == "renovating" else None

    @property
    def modes(self) -> np.ndarray:
        """Mode numbers ``(M, 3)`` of the representatives (one of each ``+-k``)."""
        return self._cache["modes"]

    def check_box(self, box) -> None:
        if tuple(box.lengths) != tuple(self.lengths):
            raise ParameterError("lengths", list(box.lengths), f"the box the flow was built for {list(self.lengths)}")
        reach = np.abs(self.modes).max(axis=0)
        for axis, m, mk, n in zip("xyz", reach, box.max_kept_modes, box.grid):
            if m > mk:
                raise ParameterError("grid", list(box.grid),
                                     f"at least {3 * int(m) + 1} points along {axis} for the random-helical "
                                     f"band (mode number {int(m)} must be below n/3 after dealiasing)")

    def velocity(self, x, y, z, t):
        """``u = sum_r 2 Re(c_r exp(i k_r.x))`` summed mode by mode at any coordinates; on a grid a
        layout synthesises it with its own transform from :meth:`fourier_modes`."""
        return _mode_sum(self.coefficients(t), self._cache["k"], x, y, z)

    def fourier_modes(self, t: float) -> tuple[np.ndarray, np.ndarray]:
        """Integer mode numbers ``(M, 3)`` and coefficients ``(M, 3)`` of ``u = sum_r 2 Re(c_r exp(i k_r.x))``."""
        return self.modes, self.coefficients(t)

    # --- amplitudes -----------------------------------------------------------------------------
    def coefficients(self, t: float) -> np.ndarray:
        """Normalised coefficients ``c_k (M, 3)`` of the representative modes at time ``t``."""
        if self.time_dependence == "steady":
            plus, minus = self._draw(0)
            return self._normalised(plus, minus)
        if self.time_dependence == "renovating":
            return self._renovated(self._renewal_index(t))
        plus, minus = self._ou_amplitudes(t)
        return self._normalised(plus, minus)

    def _generator(self, stream: int, index: int) -> np.random.Generator:
        return np.random.default_rng(np.random.SeedSequence([self.seed, stream, index]))

    def _draw(self, index: int) -> tuple[np.ndarray, np.ndarray]:
        """Helical amplitudes ``a+, a-`` of realisation ``index`` (complex Gaussian)."""
        w = self._cache["weights"]
        g = self._generator(_STREAM_DRAW, index).standard_normal((4, w.size))
        scale = np.sqrt(w / 2)
        plus = math.sqrt((1 + self.sigma) / 2) * scale * (g[0] + 1j * g[1])
        minus = math.sqrt((1 - self.sigma) / 2) * scale * (g[2] + 1j * g[3])
        return plus, minus

    def _normalised(self, plus, minus) -> np.ndarray:
        c = plus[:, None] * self._cache["h_plus"] + minus[:, None] * self._cache["h_minus"]
        mean_square = 2 * float(np.sum(np.abs(c) ** 2))  # each representative stands for +-k
        return c * (self.u_rms / math.sqrt(mean_square))

    def _renewal_index(self, t: float) -> int:
        ratio = t / self.tau
        nearest = round(ratio)
        return int(nearest if abs(ratio - nearest) <= 1e-9 * max(1.0, abs(ratio)) else math.floor(ratio))

    def _renovated(self, index: int) -> np.ndarray:
        store = self._cache["realisations"]
        if index not in store:
            redraw = self.renewal in ("redraw", "redraw-shift")
            c = self._normalised(*self._draw(index if redraw else 0))
            if self.renewal in ("shift", "redraw-shift"):
                shift = self._generator(_STREAM_SHIFT, index).random(3) * np.asarray(self.lengths)
                c = c * np.exp(-1j * (self._cache["k"] @ shift))[:, None]
            if len(store) > 4:
                store.pop(next(iter(store)))
            store[index] = c
        return store[index]

    def _ou_amplitudes(self, t: float) -> tuple[np.ndarray, np.ndarray]:
        if t < 0:
            raise ValueError("the Ornstein-Uhlenbeck flow is defined for t >= 0")
        position = t * OU_STEPS_PER_TAU / self.tau
        i = int(math.floor(position))
        frac = position - i
        path = self._ou_block(i // OU_BLOCK)
        j = i % OU_BLOCK
        a = (1 - frac) * path[j] + frac * path[j + 1] if frac else path[j]
        n = a.size // 2
        return a[:n], a[n:]

    def _ou_block(self, block: int) -> np.ndarray:
        """Amplitudes at the ``OU_BLOCK + 1`` fine times of ``block`` (stacked ``[a+, a-]``)."""
        cache = self._cache
        if cache.get("ou_block_index") == block:
            return cache["ou_block"]
        starts = cache.setdefault("ou_starts", {})
        if 0 not in starts:
            plus, minus = self._draw(0)
            starts[0] = np.concatenate([plus, minus])
        first = max(b for b in starts if b <= block)
        for b in range(first, block + 1):
            path = self._ou_path(b, starts[b])
            starts[b + 1] = path[-1]
        cache["ou_block_index"], cache["ou_block"] = block, path
        return path

    def _ou_path(self, block: int, start: np.ndarray) -> np.ndarray:
        w = self._cache["weights"]
        s = np.concatenate([math.sqrt((1 + self.sigma) / 2) * np.sqrt(w / 2),
                            math.sqrt((1 - self.sigma) / 2) * np.sqrt(w / 2)])
        rho = math.exp(-1.0 / OU_STEPS_PER_TAU)
        g = self._generator(_STREAM_OU, block).standard_normal((OU_BLOCK, 2, s.size))
        kicks = math.sqrt(1 - rho * rho) * s * (g[:, 0] + 1j * g[:, 1])
        path = np.empty((OU_BLOCK + 1, s.size), dtype=complex)
        path[0] = start
        # path[j+1] = rho path[j] + kicks[j], as a first-order recursive filter along the block
        from scipy.signal import lfilter  # imported here: scipy.signal costs ~1 s at start-up

        path[1:], _ = lfilter([1.0], [1.0, -rho], kicks, axis=0, zi=rho * start[None, :])
        return path


def _mode_sum(c: np.ndarray, k: np.ndarray, x, y, z):
    """``u = sum_r 2 Re(c_r exp(i k_r.x))`` at broadcastable coordinates (no grid needed)."""
    x, y, z = (np.asarray(v, dtype=float) for v in (x, y, z))
    shape = np.broadcast_shapes(x.shape, y.shape, z.shape)
    points = np.stack([np.broadcast_to(v, shape).ravel() for v in (x, y, z)], axis=1)
    out = np.empty((3, points.shape[0]))
    for start in range(0, points.shape[0], 4096):
        phase = np.exp(1j * points[start:start + 4096] @ k.T)
        out[:, start:start + 4096] = 2 * (phase @ c).real.T
    return tuple(o.reshape(shape) for o in out)


__all__ = ["RandomHelicalFlow", "band_modes", "helical_basis", "shell_weights"]
