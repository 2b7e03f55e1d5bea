"""The 3-D periodic box split over MPI processes by mpi4py-fft (protocol: :mod:`kindyn.layout`).

Each process holds a block of the physical grid and a block of the real-to-complex half grid (the
decomposition and its transposes are mpi4py-fft's: a slab over x in physical space, split over y
in spectral space, or a pencil). Everything that depends on the block is here: local coordinates,
local mode numbers and wavenumbers (so the 2/3 band, the Parseval weights and the mean modes are
local arrays), whether ``k = 0`` is held, and every reduction as an allreduce. Conventions are
those of :mod:`kindyn.layout.box_layout`; nothing else in kindyn changes.

Fields that must be the same whatever the number of processes are drawn globally and cut locally:
a random physical field is the global stream of ``rng.standard_normal((c, nx, ny, nz))`` drawn
plane by plane (each process keeps its block, so memory stays local), Fourier-mode flows are
placed by their global mode numbers, and coefficient arrays of the whole grid are sliced.
"""

from __future__ import annotations

from functools import cached_property

import numpy as np

from kindyn.box import Box, fft_mode_numbers, kept_index_ranges, max_kept_mode
from kindyn.layout.box_layout import BoxLayout
from kindyn.layout.spectral import band_support
from kindyn.transforms import PRECISIONS, TransformSettings
from kindyn.transforms.distributed import Communicator, DistributedEngine, local_slices, make_plan, process_grid


def _local_ranges(ranges, local: slice) -> list[slice]:
    """Index ranges (global, unit step) intersected with the local slice, as local index ranges."""
    out = []
    for r in ranges:
        start, stop = max(r.start, local.start), min(r.stop, local.stop)
        if stop > start:
            out.append(slice(start - local.start, stop - local.start))
    return out


class DistributedBoxLayout(BoxLayout):
    """The box over the processes of ``communicator`` (a :class:`~kindyn.transforms.distributed.Communicator`)."""

    def __init__(self, box: Box, transforms: TransformSettings = TransformSettings(), communicator=None,
                 decomposition: str = "auto", requested_grid=None):
        super().__init__(box, transforms)
        self.communicator = communicator if communicator is not None else Communicator()
        self.processes = self.communicator.size
        self.process_grid = process_grid(decomposition, self.processes, box.grid, requested_grid)
        real_dtype = PRECISIONS[transforms.precision][0]
        self.plan = make_plan(box.grid, real_dtype, self.process_grid, self.communicator.comm)
        self.physical_slices, self.spectral_slices = local_slices(self.plan)
        self._probe_maps = {}

    @property
    def is_root(self) -> bool:
        return self.communicator.rank == 0

    # --- what this process holds ------------------------------------------------------------
    @property
    def physical_shape(self):
        return tuple(s.stop - s.start for s in self.physical_slices)

    @property
    def spectral_shape(self):
        return tuple(s.stop - s.start for s in self.spectral_slices)

    @cached_property
    def coordinates(self):
        axes = [self.box.axis(i)[s] for i, s in enumerate(self.physical_slices)]
        return (axes[0][:, None, None], axes[1][None, :, None], axes[2][None, None, :])

    @cached_property
    def mode_numbers(self):
        nx, ny, nz = self.grid
        mx, my, mz = fft_mode_numbers(nx), fft_mode_numbers(ny), np.arange(nz // 2 + 1)
        sx, sy, sz = self.spectral_slices
        return (mx[sx][:, None, None], my[sy][None, :, None], mz[sz][None, None, :])

    @cached_property
    def parseval_weights(self):
        nz = self.grid[2]
        mz = self.mode_numbers[2][0, 0, :]
        w = np.where((mz == 0) | ((nz % 2 == 0) & (mz == nz // 2)), 1.0, 2.0)
        return np.broadcast_to(w[None, None, :], self.spectral_shape)

    @cached_property
    def band(self):
        nx, ny, nz = self.grid
        sx, sy, sz = self.spectral_slices
        z_kept = max(0, min(sz.stop, max_kept_mode(nz) + 1) - sz.start)
        x_ranges = _local_ranges(kept_index_ranges(nx), sx)
        y_ranges = _local_ranges(kept_index_ranges(ny), sy)
        return band_support((x_ranges, y_ranges, z_kept), self.spectral_shape)

    @property
    def uniform_mode(self):
        return (0, 0, 0) if all(s.start == 0 for s in self.spectral_slices) else None

    # --- transforms ---------------------------------------------------------------------------
    def engine(self, components: int = 3, purpose: str = "operator"):
        key = (components, purpose)
        if key not in self._engines:
            real_dtype, complex_dtype = PRECISIONS[self.transforms.precision]
            self._engines[key] = DistributedEngine(self.plan, components, real_dtype, complex_dtype)
        return self._engines[key]

    def spectral_from_modes(self, modes, coefficients) -> np.ndarray:
        """The local block of :meth:`kindyn.layout.BoxLayout.spectral_from_modes`."""
        modes, c = np.asarray(modes, int).copy(), np.asarray(coefficients, complex).copy()
        flip = modes[:, 2] < 0
        modes[flip], c[flip] = -modes[flip], np.conj(c[flip])
        plane = modes[:, 2] == 0
        modes = np.concatenate([modes, -modes[plane] * np.array([1, 1, 0])])
        c = np.concatenate([c, np.conj(c[plane])])
        nx, ny, _ = self.grid
        index = np.stack([modes[:, 0] % nx, modes[:, 1] % ny, modes[:, 2]], axis=1)
        held = np.all([(index[:, i] >= s.start) & (index[:, i] < s.stop) for i, s in enumerate(self.spectral_slices)],
                      axis=0)
        u_hat = np.zeros((3, *self.spectral_shape), dtype=complex)
        local = index[held] - np.array([s.start for s in self.spectral_slices])
        u_hat[:, local[:, 0], local[:, 1], local[:, 2]] = c[held].T
        return u_hat

    def physical_from_coefficients(self, u_hat: np.ndarray) -> np.ndarray:
        return self.physical_from_spectral(self.local_part(np.asarray(u_hat)).astype(self.complex_dtype))

    # --- whole-grid arrays --------------------------------------------------------------------
    def local_part(self, global_hat: np.ndarray) -> np.ndarray:
        """This process's block of a whole half-grid array ``(..., nx, ny, nz//2+1)``."""
        return np.ascontiguousarray(global_hat[(Ellipsis, *self.spectral_slices)])

    def gather_spectral(self, local_hat: np.ndarray):
        """The whole half-grid array on the first process (``None`` on the others)."""
        return self._gather(local_hat, self.spectral_slices, self.box.spectral_shape)

    def gather_physical(self, local: np.ndarray):
        """The whole physical array on the first process (``None`` on the others)."""
        return self._gather(local, self.physical_slices, self.box.shape)

    def _gather(self, local, slices, shape):
        parts = self.communicator.gather((slices, np.ascontiguousarray(local)))
        if parts is None:
            return None
        out = np.empty((*local.shape[:-3], *shape), dtype=local.dtype)
        for where, block in parts:
            out[(Ellipsis, *where)] = block
        return out

    def standard_normal(self, rng, components: int) -> np.ndarray:
        """The local block of ``rng.standard_normal((components, nx, ny, nz))``, drawn plane by plane."""
        nx, ny, nz = self.grid
        sx, sy, sz = self.physical_slices
        out = np.empty((components, *self.physical_shape))
        for c in range(components):
            for i in range(nx):
                plane = rng.standard_normal((ny, nz))
                if sx.start <= i < sx.stop:
                    out[c, i - sx.start] = plane[sy, sz]
        return out

    def probe_vector(self, b_hat: np.ndarray, indices: np.ndarray) -> np.ndarray:
        """The probe values at whole-grid flat ``indices`` (real, imaginary parts of every component),
        gathered from the processes that hold them, in the order of ``indices``."""
        key = id(indices)
        if key not in self._probe_maps:
            global_index = np.unravel_index(indices, self.box.spectral_shape)
            held = np.all([(g >= s.start) & (g < s.stop) for g, s in zip(global_index, self.spectral_slices)], axis=0)
            local = np.ravel_multi_index(tuple(g[held] - s.start for g, s in zip(global_index, self.spectral_slices)),
                                         self.spectral_shape) if held.any() else np.zeros(0, int)
            self._probe_maps[key] = (indices, np.flatnonzero(held), local)
        _, positions, local = self._probe_maps[key]
        picked = np.zeros((b_hat.shape[0], indices.size), dtype=complex)
        picked[:, positions] = b_hat.reshape(b_hat.shape[0], -1)[:, local]
        picked = self.total(picked)
        return np.concatenate([picked.real.ravel(), picked.imag.ravel()]).astype(float)

    def from_root(self, value):
        return self.communicator.broadcast(value)

    def velocity_components(self, flow, t: float, dtype=None):
        """As :meth:`kindyn.layout.BoxLayout.velocity_components`; an error on any process (a user
        flow that raises on its block) is raised on every process, so none waits in a collective."""
        from kindyn.errors import FlowError, KindynError

        result, error = None, None
        try:
            result = super().velocity_components(flow, t, dtype)
        except KindynError as exc:
            error = exc
        found = self.communicator.agree(error)
        if found is not None:
            kind, message = found
            raise (kind if issubclass(kind, KindynError) else FlowError)(message)
        return result

    # --- reductions ---------------------------------------------------------------------------
    def total(self, value):
        return self.communicator.total(value)

    def maximum(self, value):
        return self.communicator.maximum(value)
