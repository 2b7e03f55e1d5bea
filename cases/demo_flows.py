"""Velocity functions for the example case user-callable-corvid-ring.toml (invented scenario).

kindyn calls ``function(x, y, z, t, **parameters)`` with broadcastable coordinate arrays
(x (nx,1,1), y (1,ny,1), z (1,1,nz), or any other broadcastable set) and a float time, and expects
three components that broadcast to the coordinates. This module is loaded only because the case
names it (``function = "demo_flows.py:drifting_cells"``).
"""

import numpy as np


def drifting_cells(x, y, z, t, U=1.0, k=1.0, drift=0.6, omega=1.0):
    """Helical Roberts cells whose centres drift back and forth along x and y.

    u = U (cos(k y + b), sin(k x + a), cos(k x + a) + sin(k y + b)),
    a = drift cos(omega t), b = drift sin(omega t): solenoidal (no component depends on its own
    coordinate), period 2 pi / omega.
    """
    a = drift * np.cos(omega * t)
    b = drift * np.sin(omega * t)
    zero = 0.0 * z
    return (U * np.cos(k * y + b) + zero,
            U * np.sin(k * x + a) + zero,
            U * (np.cos(k * x + a) + np.sin(k * y + b)) + zero)
