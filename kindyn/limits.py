"""The range every number of a case lies in (or is 0), for the case sections and the flows' own keys.

Far beyond any physical or numerical setting, and far enough inside the floating-point range that
squares, products with grid sizes and exponentials of ratios stay finite (1e-300 lengths give
``|k|^2 = inf``; 1e308 wavenumbers overflow mode numbers; a flow amplitude of 1e300 overflows its
own kinetic energy). Whole numbers fit a signed 64-bit integer (numpy, netCDF attributes, seeds).
"""

from __future__ import annotations

import math

MAX_MAGNITUDE = 1e100
MIN_MAGNITUDE = 1e-100
MAGNITUDE = "between 1e-100 and 1e100"
MAX_INTEGER = 2**63 - 1


def in_range(value: float) -> bool:
    """``value`` is finite and 0 or of magnitude in ``[MIN_MAGNITUDE, MAX_MAGNITUDE]``."""
    return math.isfinite(value) and (value == 0 or MIN_MAGNITUDE <= abs(value) <= MAX_MAGNITUDE)
