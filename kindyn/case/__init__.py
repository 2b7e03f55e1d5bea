"""Case files: TOML -> validated frozen dataclasses.

:func:`read_config` validates a case into a :class:`CaseConfig` (one frozen dataclass per section,
see :mod:`kindyn.case.sections`) without building anything; :func:`load_case` also builds the box,
the flow, eta and Rm into a :class:`Case` (see :mod:`kindyn.case.load`).
"""

from kindyn.case.config import CaseConfig, parse_override, read_config
from kindyn.case.load import Case, load_case

__all__ = ["Case", "CaseConfig", "load_case", "parse_override", "read_config"]
