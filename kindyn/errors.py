"""Error types that carry where the problem is (file, key) and what was expected.

The command line turns every :class:`KindynError` into one line on stderr and a non-zero exit
code; nothing else should reach the user as a traceback.
"""

from __future__ import annotations


class KindynError(Exception):
    """Base class of all errors a user can cause or must be told about."""


class CaseError(KindynError):
    """A case file (or a ``--set`` override) is wrong.

    The message reads ``FILE: KEY = VALUE: expected WHAT`` so that the user can fix it without
    reading code.
    """

    def __init__(self, file: str, key: str, value: object, expected: str):
        self.file, self.key, self.value, self.expected = str(file), key, value, expected
        shown = _show(value)
        where = f"{self.file}: " if self.file else ""
        if key:
            text = f"{where}{key} = {shown}: expected {expected}" if value is not _MISSING else \
                f"{where}{key} is missing: expected {expected}"
        else:
            text = f"{where}{expected}"
        super().__init__(text)


class FlowError(KindynError):
    """A flow cannot be built or fails its checks (periodicity, divergence, finite values)."""


class NumericalError(KindynError):
    """The integration produced NaN/Inf or ran away; the message gives step, time and energy."""


class _Missing:
    def __repr__(self) -> str:
        return "<missing>"


_MISSING = _Missing()
MISSING = _MISSING


def _show(value: object, limit: int = 80) -> str:
    text = repr(value) if not isinstance(value, str) else f'"{value}"'
    return text if len(text) <= limit else text[: limit - 3] + "..."


class ParameterError(KindynError):
    """A component's parameter is impossible; the case loader adds the file and section.

    ``key`` is the parameter name inside its section, ``expected`` says what is allowed.
    """

    def __init__(self, key: str, value: object, expected: str):
        self.key, self.value, self.expected = key, value, expected
        super().__init__(f"{key} = {_show(value)}: expected {expected}")
