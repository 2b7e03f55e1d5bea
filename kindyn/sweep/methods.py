"""How one point of a sweep is solved: ``[sweep] method = "..."`` looked up in :data:`METHODS`.

A method is a function ``runner(case, output, checkpoint) -> dict`` that solves the resolved
``case``, writes its netCDF record to ``output`` atomically (temporary name, then rename), may use
``checkpoint`` (a path) to survive a kill, and returns plain numbers with at least the keys
``growth_rate``, ``growth_rate_error``, ``frequency``, ``converged``, ``Rm``, ``resolution_warning``
and ``stop_reason``. A method is registered with one line in :data:`METHODS`, either as the
function itself or as ``"package.module:function"`` (imported only when that method is used), e.g.
an eigen-solver: ``"eigen": "kindyn.eigen.sweep:eigen_point"``.
"""

from __future__ import annotations

import importlib
from pathlib import Path


def growth_point(case, output: Path, checkpoint: Path) -> dict:
    """Time-step to a converged growth rate (:func:`kindyn.run.run_growth`), as ``kindyn run`` does."""
    from kindyn.output.checkpoint import Checkpoint
    from kindyn.output.growth_file import record_growth_run
    from kindyn.run import run_growth

    import sys

    # one line on the sweep's stderr when the point's checkpoint is discarded or cannot be written
    saved = Checkpoint(checkpoint, notify=lambda text: print(f"kindyn sweep: note: point {Path(output).stem}: {text}",
                                                             file=sys.stderr, flush=True))
    summary, _ = record_growth_run(output, case, run_growth(case, checkpoint=saved))
    saved.remove()
    return summary


def modes_point(case, output: Path, checkpoint: Path) -> dict:
    """Leading eigenvalue by the Krylov eigen-solver (:mod:`kindyn.eigen`), as ``kindyn modes`` does.

    Much faster than time stepping near onset; no checkpoint is needed (a point is one solve).
    """
    from kindyn.eigen.solve import point_summary, solve_modes
    from kindyn.output.modes_file import write_modes_file

    outcome = solve_modes(case, count=1, with_fields=False)
    summary = point_summary(case, outcome)
    cautions = [outcome.resolution_caution] if outcome.resolution_caution else []
    write_modes_file(output, case, outcome, summary, cautions)
    return summary


METHODS: dict = {
    "growth": growth_point,
    "modes": modes_point,
    "testfield": "kindyn.sweep.testfield_ensemble:testfield_point",  # test-field ensembles (realisations)
}


def method_runner(name: str):
    """The runner registered as ``name`` (a ``"module:function"`` entry is imported now)."""
    entry = METHODS[name]
    if isinstance(entry, str):
        module, _, attr = entry.partition(":")
        return getattr(importlib.import_module(module), attr)
    return entry
