"""All case sections: the section dataclasses by name.

``SECTIONS`` maps a section name to its frozen dataclass (a :class:`~kindyn.case.schema.SectionConfig`,
whose fields declare the keys); ``FREEFORM_SECTIONS`` maps a section to a validator
``(raw dict or None, file) -> frozen object with as_dict()`` for sections whose keys are not fixed
(the swept keys of ``[sweep]``). Every name here is a field of :class:`kindyn.case.config.CaseConfig`.

The case package sits below the commands: the sections of the eigen-solver, the test fields and the
sweeps are defined here in the case package, and those packages import them, never the reverse.
"""

from __future__ import annotations

from kindyn.case.cluster_section import ClusterConfig
from kindyn.case.modes_section import ModesConfig
from kindyn.case.schema import DomainConfig, MagneticConfig, NumericsConfig, OutputConfig, RunConfig, SectionConfig
from kindyn.case.sweep_section import validate_sweep
from kindyn.case.testfield_section import TestfieldConfig

SECTIONS: dict[str, type[SectionConfig]] = {
    "domain": DomainConfig,
    "magnetic": MagneticConfig,
    "run": RunConfig,
    "numerics": NumericsConfig,
    "output": OutputConfig,
    "testfield": TestfieldConfig,
    "modes": ModesConfig,
    "cluster": ClusterConfig,
}
FREEFORM_SECTIONS: dict = {"sweep": validate_sweep}
