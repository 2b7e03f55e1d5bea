"""Eigenmodes of the kinematic dynamo problem: Krylov solves, Floquet multipliers, the single-k_z reduction.

Modules: :mod:`~kindyn.eigen.basis` (vector parametrisations), :mod:`~kindyn.eigen.propagator`
(matrix-free ``exp(L T)`` from the time-stepper), :mod:`~kindyn.eigen.arnoldi` (growing Arnoldi),
:mod:`~kindyn.eigen.krylov` (Arnoldi/ARPACK, ``mu -> p``),
:mod:`~kindyn.eigen.floquet` (period maps), :mod:`~kindyn.eigen.z_independent` (``B = b(x, y) exp(i k_z z)``),
:mod:`~kindyn.eigen.settings` (the ``[modes]`` case keys) and :mod:`~kindyn.eigen.solve` (case ->
leading modes; :func:`~kindyn.eigen.solve.point_summary` for sweeps). Nothing is imported here, so that
registering the case keys stays cheap.
"""
