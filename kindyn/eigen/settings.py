"""The ``[modes]`` case section, defined in :mod:`kindyn.case.modes_section` (the case package sits
below the eigen-solver) and re-exported here for the solver's readers.
"""

from __future__ import annotations

from kindyn.case.modes_section import METHODS, MODES, ModesConfig

__all__ = ["METHODS", "MODES", "ModesConfig"]
