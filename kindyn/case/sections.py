"""All case sections: the core key tables and the sections of the other commands.

``SECTIONS`` maps a section name to its key table (see :mod:`kindyn.case.schema`);
``FREEFORM_SECTIONS`` maps a section to a validator ``(raw dict or None, file) -> object`` for
sections whose keys are not fixed (e.g. the swept keys of ``[sweep]``).
"""

from __future__ import annotations

from kindyn.case import schema

SECTIONS = dict(schema.SECTIONS)
FREEFORM_SECTIONS: dict = {}
