"""A case ready to compute: the validated :class:`~kindyn.case.config.CaseConfig` plus what is built
from it (the box, the flow, eta and Rm), before any computation.

:func:`load_case` = :func:`~kindyn.case.config.read_config` (parse, override, validate; builds
nothing) then :func:`build_case` (box, flow, diffusivity). Errors of either step raise
:class:`~kindyn.errors.CaseError` naming the file (or the ``--set`` override), the dotted key, the
bad value and what is expected.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, fields
from pathlib import Path

from kindyn.box import Box
from kindyn.case.config import (CaseConfig, apply_overrides, check_one_diffusivity, naming_overrides, parse_override,
                                read_config, read_toml, validate_config)
from kindyn.case.budget import check_budget, current_purpose
from kindyn.case.ranges import check_band, check_decay, check_flow_scale
from kindyn.case.schema import MagneticConfig, validate_section
from kindyn.errors import CaseError, ParameterError

__all__ = ["Case", "NOT_IN_IDENTITY", "apply_overrides", "build_case", "load_case", "parse_override",
           "read_toml", "resolve_diffusivity", "validate_case", "validate_section"]

# Keys that choose how a result is computed but not the arithmetic: the array-kernel sets compute
# the same operations in the same order (kindyn.array_kernels), so a checkpoint or sweep point made
# with one set stands for the other.
NOT_IN_IDENTITY = (("numerics", "array_kernels"), ("numerics", "decomposition"), ("numerics", "process_grid"))


@dataclass(frozen=True, kw_only=True)
class Case(CaseConfig):
    """A validated case with its built pieces: the box, the flow, eta and Rm."""

    box: Box
    flow: object
    eta: float
    Rm: float

    @property
    def resolved(self) -> dict:
        """Every value after defaults and overrides (JSON-ready), for identity and provenance."""
        data = {name: section.as_dict() for name, section in self.sections.items()}
        data["domain"] = {"lengths": list(self.box.lengths), "grid": list(self.box.grid)}
        data["flow"] = {"type": self.flow_type, **self.flow_params}
        data["magnetic"] = {**data.get("magnetic", {}), "eta": self.eta, "Rm": self.Rm}
        return json.loads(json.dumps(data, default=_jsonable))

    @property
    def fingerprint(self) -> str:
        """Hash of :attr:`resolved` without the keys of :data:`NOT_IN_IDENTITY`: two cases with the
        same physics and numerics share it (checkpoints and sweep points are found by it)."""
        data = self.resolved
        data.pop("cluster", None)  # where points run (empty, added after the first fingerprints)
        for section, key in NOT_IN_IDENTITY:
            data.get(section, {}).pop(key, None)
        text = json.dumps(data, sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]


def _jsonable(value):
    if isinstance(value, tuple):
        return list(value)
    return str(value)


def load_case(path, overrides=(), text: str | None = None) -> Case:
    """Read, override and validate a case file; build the box and the flow."""
    return build_case(read_config(path, overrides, text))


def validate_case(data: dict, file: str, text: str = "", overrides=()) -> Case:
    """Validate parsed TOML (overrides already applied) and build the case."""
    return build_case(validate_config(data, file, text, overrides))


def build_case(config: CaseConfig) -> Case:
    """The box, the flow and the diffusivity of a validated case (errors name file, key, value)."""
    file = config.path
    with naming_overrides(file, config.overrides):
        check_budget(config)  # memory, cores and sizes: before anything is allocated
        box = Box(config.domain.lengths, config.domain.grid)
        check_band(box, file)
        flow = build_flow(config.flow_type, config.flow_params, box, file)
        check_budget(config, flow)  # the estimate again, now that the flow's shape is known
        check_flow_scale(box, flow, file)
        eta, Rm = resolve_diffusivity(config.magnetic, flow, file)
        check_decay(config, box, flow, eta, Rm, current_purpose()[0])
    values = {f.name: getattr(config, f.name) for f in fields(CaseConfig)}
    return Case(**values, box=box, flow=flow, eta=eta, Rm=Rm)


def build_flow(flow_type: str, params: dict, box: Box, file: str):
    """The registered flow ``flow_type`` built and checked against ``box``."""
    from kindyn.flows import make_flow

    try:
        return make_flow(flow_type, params, box, str(Path(file).parent))
    except ParameterError as exc:
        section = "domain" if exc.key == "grid" else "flow"
        raise CaseError(file, f"{section}.{exc.key}", exc.value, exc.expected) from None
    except (ArithmeticError, RecursionError) as exc:  # overflow, division by zero in a flow's setup
        raise CaseError(file, "flow", flow_type, f"parameters the {flow_type} flow can compute with "
                        f"({type(exc).__name__}: {exc})") from None


def resolve_diffusivity(magnetic: MagneticConfig, flow, file: str) -> tuple[float, float]:
    """(eta, Rm) from the one given and the flow's ``U/k_f`` (``Rm = U/(eta k_f)``).

    The Rm rule (:mod:`kindyn.flows.scales`): built-in flows declare U and k_f; a user flow takes
    them from the case (or its velocity file) and must declare both when ``magnetic.Rm`` is given;
    with ``magnetic.eta`` the undeclared ones are measured (the flow's ``scale_rule`` says which).
    """
    from kindyn.flows.scales import require_declared

    check_one_diffusivity(magnetic, file)
    eta, Rm = magnetic.eta, magnetic.Rm
    try:
        require_declared(flow, Rm is not None)
    except ParameterError as exc:
        raise CaseError(file, f"flow.{exc.key}", exc.value, exc.expected) from None
    scale = flow.speed / flow.wavenumber
    if scale <= 0 or not math.isfinite(scale):
        raise CaseError(file, "flow", "U = 0", "a flow with non-zero speed (Rm is undefined)")
    if eta is None:
        return scale / Rm, Rm
    return eta, scale / eta
