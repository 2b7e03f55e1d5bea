"""The planar reduction for flows that do not depend on z.

When ``u = u(x, y, t)``, the induction equation commutes with translations in z, so each vertical
wavenumber evolves on its own: ``B(x, y, z, t) = b(x, y, t) exp(i k_z z)`` (real field:
``Re B``; the ``-k_z`` problem is the complex conjugate, so its eigenvalues are the conjugates)
with

    db/dt = curl_q(u x b) + eta (Lap_2 - k_z^2) b,      curl_q = (d/dx, d/dy, i k_z) x

on an ``nx x ny`` grid of box ``Lx x Ly``: complex ``b``, full complex FFTs
(:mod:`kindyn.transforms.planar`), ``d/dz -> i k_z``, dealiasing by the 2/3 rule
in x and y (``3 |m| < n``), and the diffusion ``eta |q|^2``, ``q = (k_x, k_y, k_z)``, integrated
exactly by the same :class:`~kindyn.stepping.IntegratingFactorStepper` as the 3-D solver. A 3-D box
of height ``Lz = 2 pi / k_z`` holds exactly the wavenumbers ``m k_z``; its spectrum is the union of
the planar spectra at ``k_z = m 2 pi / Lz`` (and their conjugates for ``m < 0``).

Layout: physical and spectral planar arrays have shape ``(3, nx, ny)`` (component first), spectral
in FFT order; ``b(x, y) = sum b_hat exp(i (k_x x + k_y y))``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from kindyn.box import fft_mode_numbers, kept_by_two_thirds, kept_index_ranges, max_kept_mode
from kindyn.calculus import cross
from kindyn.errors import FlowError
from kindyn.array_kernels import make_kernels
from kindyn.stepping import TABLEAUX, IntegratingFactorStepper
from kindyn.stepping.integrating_factor import BlockSupport
from kindyn.transforms.planar import make_planar_engine


@dataclass(frozen=True)
class PlanarGrid:
    """Periodic ``Lx x Ly`` plane sampled on ``nx x ny`` points, for one vertical wavenumber ``kz``."""

    lengths: tuple[float, float]
    grid: tuple[int, int]
    kz: float

    def __post_init__(self):
        object.__setattr__(self, "lengths", tuple(float(v) for v in self.lengths))
        object.__setattr__(self, "grid", tuple(int(v) for v in self.grid))
        object.__setattr__(self, "kz", float(self.kz))
        if len(self.lengths) != 2 or len(self.grid) != 2 or min(self.lengths) <= 0 or min(self.grid) < 1:
            raise ValueError("a planar grid needs two positive lengths and two positive grid sizes")

    @property
    def shape(self) -> tuple[int, int]:
        return self.grid

    def axis(self, i: int) -> np.ndarray:
        return np.arange(self.grid[i]) * (self.lengths[i] / self.grid[i])

    @cached_property
    def mode_numbers(self) -> tuple[np.ndarray, np.ndarray]:
        nx, ny = self.grid
        return (fft_mode_numbers(nx)[:, None], fft_mode_numbers(ny)[None, :])

    @cached_property
    def wavenumbers(self) -> tuple[np.ndarray, np.ndarray, float]:
        """``(k_x (nx,1), k_y (1,ny), k_z)``."""
        mx, my = self.mode_numbers
        return (2 * np.pi * mx / self.lengths[0], 2 * np.pi * my / self.lengths[1], self.kz)

    @cached_property
    def k_squared(self) -> np.ndarray:
        kx, ky, kz = self.wavenumbers
        return kx**2 + ky**2 + kz**2

    @cached_property
    def dealias_mask(self) -> np.ndarray:
        mx, my = self.mode_numbers
        nx, ny = self.grid
        return kept_by_two_thirds(mx, nx) & kept_by_two_thirds(my, ny)

    @property
    def max_kept_wavenumbers(self) -> tuple[float, float, float]:
        return tuple(2 * np.pi * max_kept_mode(n) / L for n, L in zip(self.grid, self.lengths)) + (abs(self.kz),)


def planar_velocity(flow, grid: PlanarGrid, t: float, out: np.ndarray | None = None) -> np.ndarray:
    """The flow on the plane ``z = 0`` at time ``t``: real array ``(3, nx, ny)``."""
    x = grid.axis(0)[:, None, None]
    y = grid.axis(1)[None, :, None]
    z = np.zeros((1, 1, 1))
    if out is None:
        out = np.empty((3, *grid.shape))
    for i, component in enumerate(flow.velocity(x, y, z, t)):
        out[i] = np.broadcast_to(np.asarray(component, float), (*grid.shape, 1))[..., 0]
    return out


def is_z_independent(flow, box, times=None, rtol: float = 1e-12) -> bool:
    """Whether ``u`` does not depend on z: the flow's declaration, checked numerically.

    The velocity is sampled on the ``(x, y)`` grid of ``box`` at several heights (the grid's, plus
    off-grid ones) and times (one period, when time-periodic); it is z-independent when every sample
    equals the one at ``z = 0`` to ``rtol`` times ``max |u|``. A flow that declares
    ``z_independent = True`` but fails the check raises :class:`~kindyn.errors.FlowError`; a flow that
    declares nothing (or False) and passes is reported z-independent.
    """
    if times is None:
        period = getattr(flow, "period", None)
        times = [0.0] if (getattr(flow, "steady", False) or not period) else list(np.linspace(0, period, 5)[:-1])
    x, y = box.coordinates[0], box.coordinates[1]
    Lz = box.lengths[2]
    heights = np.concatenate([box.axis(2), Lz * np.array([0.1234567, 0.3819660, 0.7071068])])[None, None, :]
    worst, scale = 0.0, 0.0
    for t in times:
        u = [np.broadcast_to(np.asarray(c, float), (box.grid[0], box.grid[1], heights.size))
             for c in flow.velocity(x, y, heights, t)]
        for c in u:
            scale = max(scale, float(np.max(np.abs(c))))
            worst = max(worst, float(np.max(np.abs(c - c[:, :, :1]))))
    independent = worst <= rtol * max(scale, 1e-300)
    if getattr(flow, "z_independent", None) is True and not independent:
        raise FlowError(f"{type(flow).__name__} declares z_independent = True but its velocity varies with z "
                        f"by {worst:.3g} (max |u| = {scale:.3g})")
    return bool(independent)


def planar_band_blocks(grid: PlanarGrid) -> list[tuple[slice, slice]]:
    """The 2/3-rule band of the plane as disjoint rectangular blocks ``(x slice, y slice)``."""
    nx, ny = grid.grid
    return [(x, y) for x in kept_index_ranges(nx) for y in kept_index_ranges(ny)]


class PlanarInductionOperator:
    """``N(t, b_hat) = mask * (i q x (u x b)_hat)`` on the planar grid; buffers allocated once.

    :attr:`decay_rates` is ``eta |q|^2`` (shape ``(nx, ny)``), handed to the stepper. Like
    :class:`kindyn.induction.InductionOperator` it offers ``support`` and :meth:`packed`, so that the
    stepper advances only the values inside the 2/3-rule band; the ``1/(nx ny)`` of the forward
    transform is folded into the curl coefficients ``q/(nx ny)``. The band scatter and the curl are
    the block-wise array kernels of ``kernels`` (:mod:`kindyn.array_kernels`; numpy by default).
    """

    def __init__(self, grid: PlanarGrid, flow, engine, eta: float, kernels=None):
        self.grid, self.flow, self.engine, self.eta = grid, flow, engine, float(eta)
        self.kernels = kernels if kernels is not None else make_kernels("numpy")
        self.decay_rates = self.eta * grid.k_squared
        self.support = BlockSupport(planar_band_blocks(grid), grid.shape)
        scale = 1.0 / (grid.shape[0] * grid.shape[1])
        self._curl_wavenumbers = tuple(k * scale for k in grid.wavenumbers)  # (nx,1), (1,ny), k_z
        shape = grid.shape
        self._velocity = np.empty((3, *shape))
        self._field = np.empty((3, *shape), complex)
        self._scratch = np.empty(shape, complex)
        self._band_in = self._band_out = None  # for __call__ only
        self._velocity_time = None
        self.evaluations = 0

    def velocity(self, t: float) -> np.ndarray:
        if self._velocity_time is None or (not self.flow.steady and t != self._velocity_time):
            planar_velocity(self.flow, self.grid, t, out=self._velocity)
            self._velocity_time = t
        return self._velocity

    def __call__(self, t: float, b_hat: np.ndarray, out: np.ndarray) -> np.ndarray:
        """Write ``N(t, b_hat)`` for the band part of full ``(3, nx, ny)`` arrays into ``out`` (zero
        outside the band)."""
        if self._band_in is None:
            self._band_in, self._band_out = (np.empty((3, self.support.size), complex) for _ in range(2))
        self.packed(t, self.support.gather(b_hat, self._band_in), self._band_out)
        out.fill(0)
        return self.support.add_to(self._band_out, out)

    def packed(self, t: float, b_band: np.ndarray, out: np.ndarray) -> np.ndarray:
        """As ``__call__`` on band values packed as :attr:`support` describes (``(3, support.size)``)."""
        self.kernels.spectral_from_band(self.support, b_band, self.engine.spectral)
        self._emf_hat(t)
        self.kernels.curl_to_band(self.support, self.engine.spectral, self._curl_wavenumbers, out)
        self.evaluations += 1
        return out

    def _emf_hat(self, t: float) -> None:
        """``engine.spectral <- (nx ny) (u x b)_hat`` for the field in ``engine.spectral``."""
        engine = self.engine
        engine.backward()
        np.copyto(self._field, engine.physical)
        cross(self.velocity(t), self._field, out=engine.physical, scratch=self._scratch)
        engine.forward(normalise=False)


@dataclass
class PlanarSolver:
    """Engine, operator and stepper of the planar problem (mirrors :class:`kindyn.run.Solver`)."""

    grid: PlanarGrid
    engine: object
    operator: PlanarInductionOperator
    stepper: IntegratingFactorStepper


def build_planar_solver(grid: PlanarGrid, flow, eta: float, scheme: str = "rk4", threads: int = 1,
                        engine: str = "fftw", planning: str = "measure", array_kernels: str = "auto") -> PlanarSolver:
    """Engine (:func:`~kindyn.transforms.planar.make_planar_engine`), operator and RK stepper of the
    plane (stage sums by the array kernels named ``array_kernels``, see :mod:`kindyn.array_kernels`,
    on one thread: they are a small part of the planar step)."""
    engine = make_planar_engine(grid.grid, 3, engine, threads, planning)
    kernels = make_kernels(array_kernels)
    operator = PlanarInductionOperator(grid, flow, engine, eta, kernels)
    stepper = IntegratingFactorStepper(operator, operator.decay_rates, TABLEAUX[scheme],
                                       engine.spectral.shape, engine.spectral.dtype, kernels)
    return PlanarSolver(grid, engine, operator, stepper)


def planar_time_step(flow, grid: PlanarGrid, cfl: float) -> float:
    """Advective CFL step ``cfl / sum_i max|u_i| k_max,i`` with ``k_max,z = |k_z|`` (see :mod:`kindyn.timestep`)."""
    period = getattr(flow, "period", None)
    times = [0.0] if (flow.steady or not period) else list(np.linspace(0, period, 16, endpoint=False))
    speeds = np.zeros(3)
    for t in times:
        speeds = np.maximum(speeds, np.abs(planar_velocity(flow, grid, t)).reshape(3, -1).max(axis=1))
    rate = float(np.dot(speeds, grid.max_kept_wavenumbers))
    return cfl / rate if rate > 0 else math.inf


def planar_cutoff_ratio(b_hat: np.ndarray, grid: PlanarGrid) -> float:
    """Energy in the last fully kept horizontal shell over the largest shell energy.

    Shells in ``|k_h| = sqrt(k_x^2 + k_y^2)`` of width ``2 pi / max(Lx, Ly)``; ``b_hat`` has shape
    ``(ncomp, nx, ny)`` (any number of components, e.g. real and imaginary parts stacked). Like
    :func:`kindyn.diagnostics.spectra.cutoff_ratio`: a ratio that is not small means structure the grid
    cannot hold, and under-resolved solves can show spurious growth.
    """
    kx, ky, _ = grid.wavenumbers
    dk = 2 * np.pi / max(grid.lengths)
    shells = np.rint(np.sqrt(kx**2 + ky**2) / dk).astype(int)
    density = sum(np.abs(c) ** 2 for c in b_hat) * grid.dealias_mask
    spectrum = np.bincount(shells.ravel(), weights=np.asarray(density).ravel())
    last = int(np.floor(min(grid.max_kept_wavenumbers[:2]) / dk + 1e-9))
    peak = spectrum.max() if spectrum.size else 0.0
    if peak <= 0 or last < 1:
        return 0.0
    return float(spectrum[min(last, spectrum.size - 1)] / peak)
