"""Error types that carry where the problem is (file, key) and what was expected.

The command line turns every :class:`KindynError` into one line on stderr and a non-zero exit
code; nothing else should reach the user as a traceback.

What a message quotes from the user (a file name, a key, a value) is made safe for one line:
control characters, line and paragraph separators (newline, carriage return, U+0085, U+2028, U+2029) are
escaped, and at most :data:`QUOTE_LIMIT` characters of any quoted text are kept (``...`` marks a
cut). Values are shown with a bounded ``repr`` (:mod:`reprlib`: nested or huge lists are
abbreviated, never walked in full). :func:`one_line` does the same for a whole message.
"""

from __future__ import annotations

import re
import reprlib


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
        where = f"{clip(self.file)}: " if self.file else ""
        key_text = clip(str(key)) if key else ""
        if key:
            text = f"{where}{key_text} = {shown}: expected {expected}" if value is not _MISSING else \
                f"{where}{key_text} is missing: expected {expected}"
        else:
            text = f"{where}{expected}"
        super().__init__(text)


class FlowError(KindynError):
    """A flow cannot be built or fails its checks (periodicity, divergence, finite values)."""


class WriteError(KindynError):
    """A result was computed but a file of it could not be written (disk full, folder removed): one
    line naming the file and the reason, exit code 1; the command has kept the result (on stdout)."""


class NumericalError(KindynError):
    """The integration produced NaN/Inf or ran away; the message gives step, time and energy."""


class _Missing:
    def __repr__(self) -> str:
        return "<missing>"


_MISSING = _Missing()
MISSING = _MISSING


QUOTE_LIMIT = 200  # characters of any quoted file name, key or value
LINE_LIMIT = 4000  # characters of a whole message line (a safety net; messages are far shorter)

# C0/C1 controls, DEL, and the Unicode line and paragraph separators: anything that could end a line
_UNSAFE = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029]")
_NAMED = {"\n": "\\n", "\r": "\\r", "\t": "\\t"}


def escape(text: str) -> str:
    """``text`` with every character that could break a line written as an escape (``\\n``, ``\\u2028``)."""
    def replace(match):
        ch = match.group()
        return _NAMED.get(ch) or (f"\\x{ord(ch):02x}" if ord(ch) < 0x100 else f"\\u{ord(ch):04x}")
    return _UNSAFE.sub(replace, text)


def clip(text: str, limit: int = QUOTE_LIMIT) -> str:
    """``text`` escaped (:func:`escape`) and cut to ``limit`` characters (``...`` marks the cut)."""
    text = str(text)
    if len(text) > 4 * limit:  # escape only what can be shown (a quoted value may be huge)
        text = text[: 4 * limit]
    text = escape(text)
    return text if len(text) <= limit else text[: limit - 3] + "..."


_repr = reprlib.Repr()
_repr.maxlevel, _repr.maxlist, _repr.maxtuple, _repr.maxdict = 4, 12, 12, 8
_repr.maxstring, _repr.maxother, _repr.maxlong = QUOTE_LIMIT, QUOTE_LIMIT, 60


def _show(value: object, limit: int = QUOTE_LIMIT) -> str:
    """A quoted value: strings in double quotes, anything else by a bounded repr; one line, clipped."""
    if isinstance(value, str):
        return f'"{clip(value, limit - 2)}"'
    try:
        text = _repr.repr(value)
    except Exception:  # noqa: BLE001 -- a value whose repr fails is still shown
        text = f"<{type(value).__name__}>"
    return clip(text, limit)


def one_line(text: object, limit: int = LINE_LIMIT) -> str:
    """A whole message made safe for one line: escaped and cut to ``limit`` characters."""
    return clip(str(text), limit)


class ParameterError(KindynError):
    """A component's parameter is impossible; the case loader adds the file and section.

    ``key`` is the parameter name inside its section, ``expected`` says what is allowed.
    """

    def __init__(self, key: str, value: object, expected: str):
        self.key, self.value, self.expected = key, value, expected
        super().__init__(f"{clip(str(key))} = {_show(value)}: expected {expected}")
