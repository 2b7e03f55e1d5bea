"""Distributed transforms on mpi4py-fft, and the reductions a distributed layout needs (mpi4py).

This is the only module of kindyn that imports mpi4py and mpi4py-fft (installed with the ``mpi``
extra); nothing imports it unless a run is launched on several MPI processes
(:func:`kindyn.transforms.launch.launched_processes`).

Transforms: one :class:`mpi4py_fft.PFFT` plan of the real-to-complex 3-D transform over axes
``(0, 1, 2)`` of the global grid ``(nx, ny, nz)``, with a slab (``grid = (-1,)``: x distributed in
physical space) or pencil (``grid = (P, Q)``) decomposition. mpi4py-fft does the transposes; the
forward transform is normalised by ``1/(nx ny nz)`` (as every kindyn engine) unless asked not to,
the backward is the plain sum. Each process holds its local physical block and its local block of
the half grid; :class:`DistributedEngine` keeps ``(components, *local)`` buffers and transforms
component by component.

Reductions: :class:`Communicator` wraps the communicator with the few collectives kindyn uses (sum,
maximum, gather to the first process, broadcast, and a check that turns an error on any process
into the same error on all, so that no process waits forever in a collective).
"""

from __future__ import annotations

import numpy as np
from mpi4py import MPI
from mpi4py_fft import PFFT

DECOMPOSITIONS = ("auto", "slab", "pencil")


class Communicator:
    """The collectives of a distributed layout over ``comm`` (default: ``MPI.COMM_WORLD``)."""

    def __init__(self, comm=None):
        self.comm = comm if comm is not None else MPI.COMM_WORLD
        self.rank, self.size = self.comm.Get_rank(), self.comm.Get_size()

    def total(self, value):
        """Sum over processes of a number or an array (arrays of one shape on every process)."""
        if np.ndim(value) == 0:
            return self.comm.allreduce(value, op=MPI.SUM)
        local = np.ascontiguousarray(value)
        out = np.empty_like(local)
        self.comm.Allreduce(local, out, op=MPI.SUM)
        return out

    def maximum(self, value):
        """Maximum over processes of a number or an array."""
        if np.ndim(value) == 0:
            return self.comm.allreduce(value, op=MPI.MAX)
        local = np.ascontiguousarray(value)
        out = np.empty_like(local)
        self.comm.Allreduce(local, out, op=MPI.MAX)
        return out

    def gather(self, value):
        """Every process's value, as a list on the first process (``None`` elsewhere)."""
        return self.comm.gather(value, root=0)

    def allgather(self, value):
        return self.comm.allgather(value)

    def broadcast(self, value):
        """The first process's value on every process."""
        return self.comm.bcast(value, root=0)

    def agree(self, error: BaseException | None):
        """Collective: ``None`` on every process when no process had an error; otherwise the first
        error (by rank) on every process, to be raised by all of them."""
        errors = self.comm.allgather(None if error is None else (type(error), _message(error)))
        for found in errors:
            if found is not None:
                return found
        return None

    def abort(self, code: int) -> None:
        self.comm.Abort(code)


def _message(error: BaseException) -> str:
    return str(error)


def process_grid(decomposition: str, processes: int, grid, requested=None) -> tuple[int, ...]:
    """The processor grid of ``decomposition`` for ``processes`` processes on the global ``grid``.

    ``slab``: ``(P,)`` over x (needs ``P <= nx`` and ``P <= ny``: the half grid is split along y);
    ``pencil``: ``(P1, P2)`` over x and y (``requested`` or the most square factorisation);
    ``auto``: slab when it splits the grid, pencil otherwise. Raises ValueError with what is
    expected when the grid cannot be split that way.
    """
    nx, ny, nz = grid
    if decomposition not in DECOMPOSITIONS:
        raise ValueError(f"one of {', '.join(DECOMPOSITIONS)}")
    if requested is not None:
        p1, p2 = (int(v) for v in requested)
        if p1 * p2 != processes:
            raise ValueError(f"a process grid whose product is the number of processes ({processes})")
        decomposition = "pencil"
    elif decomposition in ("auto", "slab"):
        if processes <= min(nx, ny):
            return (processes,)
        if decomposition == "slab":
            raise ValueError(f"a slab decomposition needs at most min(nx, ny) = {min(nx, ny)} processes "
                             f"({processes} given); use numerics.decomposition = \"pencil\"")
        p1, p2 = _square_factors(processes)
    else:
        p1, p2 = _square_factors(processes)
    if p1 > min(nx, ny) or p2 > min(ny, nz // 2 + 1):
        raise ValueError(f"a pencil grid {p1} x {p2} that fits the grid {list(grid)} (each direction needs at least "
                         "as many points as processes)")
    return (p1, p2)


def _square_factors(n: int) -> tuple[int, int]:
    p = int(np.sqrt(n))
    while n % p:
        p -= 1
    return (n // p, p)


def make_plan(grid, real_dtype, processes_grid, comm=None) -> PFFT:
    """The mpi4py-fft plan of the 3-D real-to-complex transform of ``grid`` on ``processes_grid``."""
    return PFFT(comm if comm is not None else MPI.COMM_WORLD, tuple(grid), axes=(0, 1, 2),
                dtype=np.dtype(real_dtype), grid=tuple(processes_grid), backend="fftw")


class DistributedEngine:
    """Buffers ``real (components, *local physical)`` and ``spectral (components, *local half grid)``.

    ``forward()`` is normalised by ``1/(nx ny nz)``; ``forward(normalise=False)`` gives the plain sum
    (:attr:`unnormalised_forward`); ``backward()`` the plain inverse sum; the spectral buffer is kept.
    """

    name = "mpi4py-fft"
    unnormalised_forward = True

    def __init__(self, plan: PFFT, components: int, real_dtype, complex_dtype):
        self.plan, self.ncomp = plan, int(components)
        self.real = np.zeros((self.ncomp, *plan.forward.input_array.shape), dtype=real_dtype)
        self.spectral = np.zeros((self.ncomp, *plan.forward.output_array.shape), dtype=complex_dtype)

    def forward(self, normalise: bool = True) -> None:
        for c in range(self.ncomp):
            self.plan.forward(self.real[c], self.spectral[c], normalize=normalise)

    def backward(self) -> None:
        for c in range(self.ncomp):
            self.plan.backward(self.spectral[c], self.real[c])


def local_slices(plan: PFFT) -> tuple[tuple[slice, ...], tuple[slice, ...]]:
    """``(physical, spectral)``: the global index ranges this process holds."""
    return tuple(plan.local_slice(False)), tuple(plan.local_slice(True))
