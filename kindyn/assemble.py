"""Assembly: layout, induction operator and stepper from configuration slices, in one place.

Every driver (runs, eigen-solves, test fields, sweeps through them) builds its solver here:

* :func:`build_solver` — the 3-D problem on a :class:`~kindyn.layout.BoxLayout`;
* :func:`build_kz_plane_solver` — the single-k_z reduction at one ``k_z`` (the "planar" method) on a :class:`~kindyn.layout.KzPlaneLayout`;
* :func:`build_test_solver` — stacked test problems (fluctuations about mean test fields) on a box layout.

Each gets only what it needs: the geometry, the flow, ``eta``, a
:class:`~kindyn.transforms.TransformSettings` and the scheme name. The stability check of a time
step against the scheme's limit is here too (:func:`check_stability`), once for every driver.
"""

from __future__ import annotations

from dataclasses import dataclass

from kindyn.array_kernels import choose_threads, make_kernels
from kindyn.box import Box
from kindyn.errors import CaseError
from kindyn.induction import InductionOperator
from kindyn.layout import BoxLayout, KzPlane, KzPlaneLayout
from kindyn.stepping import TABLEAUX, IntegratingFactorStepper
from kindyn.transforms import TransformSettings


@dataclass
class Solver:
    """The pieces that advance ``b_hat``: layout (with its engine), induction operator and stepper."""

    layout: object
    operator: InductionOperator
    stepper: IntegratingFactorStepper

    @property
    def engine(self):
        return self.operator.engine

    @property
    def kernels_used(self) -> str:
        """The array-kernel set and its threads, as chosen when the solver was built."""
        kernels = self.operator.kernels
        return f"{kernels.name}, {kernels.threads} thread{'s' if kernels.threads != 1 else ''}"


def transform_settings(numerics, precision: str | None = None) -> TransformSettings:
    """The transform settings of a ``[numerics]`` configuration slice (``precision`` overrides it)."""
    return TransformSettings(numerics.fft, numerics.threads, numerics.planning, precision or numerics.precision,
                             numerics.array_kernels)


def make_box_layout(box: Box, transforms: TransformSettings = TransformSettings(), numerics=None):
    """The 3-D layout for this process: serial, or distributed over the MPI processes this run was
    launched on (``mpiexec -n P``, ``srun``; :func:`kindyn.transforms.launch.launched_processes`).
    ``numerics`` (the ``[numerics]`` slice) may choose the decomposition and process grid."""
    from kindyn.transforms.launch import launched_processes

    if launched_processes() <= 1:
        return BoxLayout(box, transforms)
    from kindyn.layout.distributed_box import DistributedBoxLayout

    decomposition = getattr(numerics, "decomposition", "auto") if numerics is not None else "auto"
    grid = getattr(numerics, "process_grid", None) if numerics is not None else None
    return DistributedBoxLayout(box, transforms, decomposition=decomposition, requested_grid=grid)


def renewal_interval(flow) -> float | None:
    """The interval between the breaks of a flow that is constant in time between them (renovating
    flows: ``renewal_time``), handed to the stepper; ``None`` for every other flow."""
    return getattr(flow, "renewal_time", None) or None


def _stepper(operator: InductionOperator, scheme: str, kernels, flow) -> IntegratingFactorStepper:
    return IntegratingFactorStepper(operator, operator.decay_rates, TABLEAUX[scheme], operator.shape,
                                    operator.engine.spectral.dtype, kernels, constant_between=renewal_interval(flow))


def build_solver(geometry, flow, eta: float, transforms: TransformSettings = TransformSettings(),
                 scheme: str = "rk4") -> Solver:
    """The 3-D solver on ``geometry`` (a :class:`~kindyn.box.Box`, or a layout already made).

    The array kernels' threads are measured (:func:`kindyn.array_kernels.choose_threads`) on whole
    operator evaluations.
    """
    layout = BoxLayout(geometry, transforms) if isinstance(geometry, Box) else geometry
    kernels = make_kernels(transforms.array_kernels, transforms.threads, layout.real_dtype)
    operator = InductionOperator(layout, flow, eta, kernels)
    choose_threads(kernels, operator.timing_probe())
    return Solver(layout, operator, _stepper(operator, scheme, kernels, flow))


def build_kz_plane_solver(grid: KzPlane, flow, eta: float, scheme: str = "rk4",
                        transforms: TransformSettings = TransformSettings()) -> Solver:
    """The planar solver at ``grid.kz`` (double precision; array kernels on one thread: they are a
    small part of that step)."""
    layout = KzPlaneLayout(grid, transforms)
    kernels = make_kernels(transforms.array_kernels)
    operator = InductionOperator(layout, flow, eta, kernels)
    return Solver(layout, operator, _stepper(operator, scheme, kernels, flow))


def build_test_solver(layout: BoxLayout, flow, eta: float, mean_field, fluctuation_of, soca: bool,
                      scheme: str = "rk4", kernels=None) -> Solver:
    """Stacked test problems about the mean test fields ``mean_field`` ``(n, 3, ...)`` with the modes of
    the average ``fluctuation_of`` removed (see :class:`~kindyn.induction.InductionOperator`)."""
    if kernels is None:
        kernels = make_kernels(layout.transforms.array_kernels, layout.transforms.threads, layout.real_dtype)
    operator = InductionOperator(layout, flow, eta, kernels, fields=len(mean_field), mean_field=mean_field,
                                 fluctuation_of=fluctuation_of, soca=soca)
    return Solver(layout, operator, _stepper(operator, scheme, kernels, flow))


def check_stability(scheme: str, courant: float, file: str, key: str, value, rate: float | None = None,
                    damping: float | None = None) -> None:
    """Refuse a time step beyond the scheme's stability limit for advection (before computing).

    ``courant = dt sum_i max|u_i| k_max,i`` bounds ``|lambda dt|`` of the advective part; it must stay
    below the tableau's limit (:meth:`kindyn.stepping.Tableau.advective_limit`), or the run would
    report the growth of a numerical instability. rk3 and rk4 have a limit on the imaginary axis;
    rk2 has none, and its limit depends on the step diffusion number ``damping = eta/(dt U^2)``
    (derivation in :mod:`kindyn.stepping.tableaux`; with ``damping=None`` it cannot be checked and is
    left alone). ``key``/``value`` name the case key that set the step; ``rate`` (the advection rate
    ``courant/dt``) lets the message say which step would do.
    """
    tableau = TABLEAUX[scheme]
    if tableau.needs_diffusion:
        if damping is None:
            return
        limit = tableau.advective_limit(damping)
        if courant <= limit:
            return
        dt = courant / rate if rate else None
        advice = ""
        if rate and dt:
            safe = _largest_rk2_courant(tableau, courant, damping)
            advice = (f" (time_step <= {safe / rate:.3g}, cfl <= {safe:.3g}, or another scheme: rk4 allows "
                      f"cfl <= {TABLEAUX['rk4'].imaginary_stability:.3g})")
        raise CaseError(file, key, value,
                        f"a step within the {tableau.name} stability limit: {tableau.name} amplifies pure advection "
                        f"at any step (|R(iy)|^2 = 1 + y^4/4) and is stable only where diffusion outweighs that; "
                        f"at the step diffusion number eta/(dt U^2) = {damping:.3g} it allows dt sum_i max|u_i| "
                        f"k_max,i <= {limit:.3g}, but the step gives {courant:.3g}{advice}")
    limit = tableau.imaginary_stability
    if courant > limit:
        advice = f" (time_step <= {limit / rate:.3g}, cfl <= {limit:.3g})" if rate else ""
        raise CaseError(file, key, value,
                        f"a step within the {tableau.name} stability limit: dt sum_i max|u_i| k_max,i = "
                        f"{courant:.3g} exceeds {limit:.3g}{advice}")


def _largest_rk2_courant(tableau, courant: float, damping: float) -> float:
    """The largest Courant number ``C' <= courant`` that the damped limit accepts, with the damping of
    the step it implies (``delta`` scales as ``1/dt``, so ``delta' = delta courant/C'``): bisection."""
    lo, hi = 0.0, courant
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if mid <= tableau.advective_limit(damping * courant / mid if mid > 0 else float("inf")):
            lo = mid
        else:
            hi = mid
    return lo
