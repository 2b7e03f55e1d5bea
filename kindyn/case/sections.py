"""All case sections: the core key tables and the sections of the other commands.

``SECTIONS`` maps a section name to its key table (see :mod:`kindyn.case.schema`);
``FREEFORM_SECTIONS`` maps a section to a validator ``(raw dict or None, file) -> object`` for
sections whose keys are not fixed (the swept keys of ``[sweep]``).

This is the one place where the case layer reaches into the command packages: each registers the
key table that lives beside the code that uses it. The settings modules import only the case
schema and the errors, never the packages' solvers.
"""

from __future__ import annotations

from kindyn.case import schema
from kindyn.eigen.settings import MODES
from kindyn.sweep.spec import validate_sweep
from kindyn.testfield.settings import TESTFIELD_KEYS

SECTIONS = {**schema.SECTIONS, "testfield": TESTFIELD_KEYS, "modes": MODES}
FREEFORM_SECTIONS: dict = {"sweep": validate_sweep}
