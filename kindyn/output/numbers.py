"""Numbers as people read them: significant digits, and a value rounded to its error.

Plain functions of numbers, used by the commands' text (:mod:`kindyn.commands.common` re-exports
them) and by the figures, so that a figure and the terminal print the same digits.
"""

from __future__ import annotations

import math


def number_text(value, digits: int = 6, sign: bool = False) -> str:
    """``value`` with ``digits`` significant digits, ``n/a`` for None/NaN."""
    if value is None or not math.isfinite(float(value)):
        return "n/a" if value is None or math.isnan(float(value)) else f"{float(value):{'+' if sign else ''}g}"
    return f"{float(value):{'+' if sign else ''}.{digits}g}"


def with_error(value, error, sign: bool = False, digits: int = 6) -> str:
    """``value +- error`` with the error rounded to one significant digit and the value to the same
    decimal place (``0.05296 +- 0.0004`` -> ``0.0530 +- 0.0004``).

    Without an error (None, NaN) the value keeps ``digits`` significant digits and is marked
    ``(no error estimate)``; an infinite error reads ``+- inf``; a zero error keeps ``digits``.
    """
    if value is None or not math.isfinite(float(value)):
        return number_text(value, digits, sign)
    value = float(value)
    if error is None or math.isnan(float(error)):
        return f"{number_text(value, digits, sign)} (no error estimate)"
    error = abs(float(error))
    if math.isinf(error):
        return f"{number_text(value, digits, sign)} +- inf"
    if error == 0.0:
        return f"{number_text(value, digits, sign)} +- 0"
    exponent = math.floor(math.log10(error))
    rounded = round(error, -exponent)
    if rounded >= 10.0 ** (exponent + 1):  # 0.096 -> 0.1
        exponent += 1
    decimals = -exponent
    plus = "+" if sign else ""
    big = max(abs(value), error)
    if decimals < 0 and big < 1e6:  # 1234.5 +- 23 -> 1230 +- 20
        return f"{round(value, decimals):{plus}.0f} +- {round(error, decimals):.0f}"
    if decimals >= 0 and (big >= 1e-4 or value == 0.0) and big < 1e6:
        if decimals > 12:  # an error far below the value's digits: twelve significant digits are enough
            return f"{value:{plus}.12g} +- {rounded:.0e}"
        return f"{value:{plus}.{decimals}f} +- {error:.{decimals}f}"
    # scientific: value and error in units of 10^e of the value (or of the error, if larger)
    e = math.floor(math.log10(big))
    places = max(0, e - exponent)
    scale = 10.0 ** e
    return f"({value / scale:{plus}.{places}f} +- {error / scale:.{places}f})e{e:+d}"
