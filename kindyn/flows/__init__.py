"""The flow library: a registry from the case's ``[flow] type`` to a flow class.

Every registered class is a frozen dataclass whose fields are the flow's case keys (see
:mod:`kindyn.flows.base` for what a flow provides). To add a flow: write the dataclass in a module
of this package and add one line to :data:`FLOW_TYPES` (DEVELOPERS.md walks through it).
Classes that need the box to be built (random ensembles, gridded data) define a classmethod
``from_case(params, box, case_dir)``; the others are built as ``cls(**params)``.
"""

from __future__ import annotations

from kindyn.flows.base import sample_velocity
from kindyn.flows.beltrami import ABCFlow, BeltramiSumFlow
from kindyn.flows.cellular import GallowayProctorFlow, RobertsFlow, TaylorGreenFlow
from kindyn.flows.random_helical import RandomHelicalFlow
from kindyn.flows.user import CallableFlow, FormulaFlow
from kindyn.flows.velocity_file import VelocityFileFlow

FLOW_TYPES: dict[str, type] = {
    "abc": ABCFlow,
    "beltrami-sum": BeltramiSumFlow,
    "roberts": RobertsFlow,
    "galloway-proctor": GallowayProctorFlow,
    "taylor-green": TaylorGreenFlow,
    "random-helical": RandomHelicalFlow,
    "formula": FormulaFlow,
    "callable": CallableFlow,
    "velocity-file": VelocityFileFlow,
}


def make_flow(type_name: str, params: dict, box, case_dir="."):
    """Build the registered flow ``type_name`` from its parameters and check it against ``box``.

    Raises :class:`~kindyn.errors.ParameterError` (the case loader adds file and section).
    """
    cls = FLOW_TYPES[type_name]
    if hasattr(cls, "from_case"):
        flow = cls.from_case(params, box, case_dir)
    else:
        flow = cls(**params)
    flow.check_box(box)
    return flow


__all__ = ["FLOW_TYPES", "make_flow", "sample_velocity"]
