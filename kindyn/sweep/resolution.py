"""Resolution studies: the same case on two or more grids, and how much the growth rate moves.

A sweep over ``"domain.grid"`` (listed in ``[sweep]`` or added by ``kindyn sweep --grids 16,24,32``)
is a resolution study. For every combination of the other swept keys the points are ordered by
their number of grid points and the report gives, between successive grids, the change of the
growth rate ``delta = gamma_fine - gamma_coarse`` and the combined uncertainty
``sigma = sqrt(sigma_fine^2 + sigma_coarse^2)``. The result is called *resolved* when the change
between the two finest grids is within ``2 sigma``, both have the same sign and the finest run
raised no resolution warning (the spectrum at the dealiasing cut-off). This is the usual check
(common practice); it cannot prove convergence, only fail to disprove it. Under-resolved runs can
show spurious growth.
"""

from __future__ import annotations

import math
import re

import numpy as np

from kindyn.errors import CaseError, ParameterError
from kindyn.sweep.critical import group_lines

GRID_KEY = "domain.grid"
_GRID_ITEM = re.compile(r"^\s*(\d+)(?:\s*x\s*(\d+)\s*x\s*(\d+))?\s*$")


def parse_grids(text: str) -> list[list[int]]:
    """``"16,24,32"`` (cubic) or ``"16x16x32,24x24x48"`` -> ``[[nx, ny, nz], ...]``."""
    grids = []
    for item in str(text).split(","):
        match = _GRID_ITEM.match(item)
        if not match:
            raise ParameterError("--grids", text, 'grids such as "16,24,32" (cubic) or "16x16x32,24x24x48"')
        n = [int(g) for g in match.groups() if g is not None]
        grid = n * 3 if len(n) == 1 else n
        if min(grid) < 1:
            raise ParameterError("--grids", text, "grid sizes >= 1")
        if grid in grids:
            raise ParameterError("--grids", text, f"distinct grids ({grid} is repeated)")
        grids.append(grid)
    if len(grids) < 2:
        raise ParameterError("--grids", text, "two or more grids for a resolution study")
    return grids


def with_grids(spec, grids, file: str):
    """``spec`` with ``"domain.grid"`` swept over ``grids`` (a new key; no [sweep] section needed)."""
    import dataclasses

    from kindyn.sweep.spec import SweepSpec

    if spec and GRID_KEY in spec.keys:
        raise CaseError(file, 'sweep."domain.grid"', "--grids", "the grids either in [sweep] or by --grids, not both")
    if not spec:
        return SweepSpec(file, (GRID_KEY,), (tuple(grids),))
    if spec.combine == "zip":
        raise CaseError(file, "sweep.combine", "zip", '"product" to add --grids to a zipped sweep '
                        '(or list "domain.grid" in the zip)')
    return dataclasses.replace(spec, keys=spec.keys + (GRID_KEY,), values=spec.values + (tuple(grids),))


def _points_of(grid) -> int:
    return int(np.prod(grid))


def resolution_study(values: list[dict], records: list[dict]) -> list[dict]:
    """One entry per combination of the other swept keys (see module docstring); ``[]`` if no grid sweep."""
    if not values or GRID_KEY not in values[0]:
        return []
    report = []
    for others, indices in group_lines(values, GRID_KEY).items():
        rows = [(values[i][GRID_KEY], records[i]) for i in indices
                if records[i] and records[i].get("growth_rate") is not None]
        rows.sort(key=lambda r: _points_of(r[0]))
        if len(rows) < 2:
            continue
        grids = [list(r[0]) for r in rows]
        gammas = [float(r[1]["growth_rate"]) for r in rows]
        errors = [_error(r[1]) for r in rows]
        changes = [gammas[j + 1] - gammas[j] for j in range(len(rows) - 1)]
        combined = [math.hypot(errors[j], errors[j + 1]) for j in range(len(rows) - 1)]
        last, sigma = changes[-1], combined[-1]
        same_sign = (gammas[-1] > 0) == (gammas[-2] > 0)
        warned = bool(rows[-1][1].get("resolution_warning"))
        resolved = bool(abs(last) <= 2 * sigma and same_sign and not warned)
        cautions = []
        if any((g > 0) != (gammas[-1] > 0) for g in gammas[:-1]):
            cautions.append("the sign of gamma changes with resolution: coarse-grid growth (or decay) is not "
                            "trustworthy here")
        if abs(last) > 2 * sigma:
            cautions.append(f"gamma still moves by {last:+.3g} (combined uncertainty {sigma:.2g}) between the two "
                            "finest grids: refine further")
        if warned:
            cautions.append("the finest run is flagged as possibly under-resolved")
        report.append({"fixed": {k: v for k, v in others}, "grids": grids, "growth_rates": gammas,
                       "growth_rate_errors": errors, "changes": changes, "combined_errors": combined,
                       "relative_change": abs(last) / abs(gammas[-1]) if gammas[-1] else None,
                       "resolved": resolved, "cautions": cautions})
    return report


def _error(record) -> float:
    """The error of one grid without its grid-dependence part: the study measures that part itself."""
    e = record.get("growth_rate_error_this_grid", record.get("growth_rate_error"))
    return float(e) if e is not None else math.inf
