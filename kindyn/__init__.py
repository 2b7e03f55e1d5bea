"""kindyn: kinematic dynamos of prescribed flows in triply periodic boxes.

Conventions (fixed once for the whole package):

* Induction equation ``dB/dt = curl(u x B) + eta Lap B`` with ``div B = 0`` and ``u`` prescribed.
* Box lengths ``(Lx, Ly, Lz)``, grid ``(nx, ny, nz)``, coordinates ``x_j = j Lx/nx`` (no endpoint).
* Vector fields have axis order ``(component, x, y, z)``; spectral arrays end in ``_hat`` and hold
  Fourier coefficients ``f(x) = sum_k f_hat(k) exp(i k.x)`` on the real-to-complex half grid
  (last axis ``kz >= 0``).
* Magnetic energy ``E_M = <|B|^2>/2``; amplitude ``~ exp(gamma t)``; eigenvalue ``p = gamma + i omega``.
* ``Rm = U/(eta k_f)`` with each flow's declared speed ``U`` and wavenumber ``k_f``.

Entry points for notebooks and scripts (:mod:`kindyn.api`; loaded on first use, so that
``import kindyn`` stays light): :func:`load_case` (a file, TOML text or a dict; a Python function
as the flow), :func:`growth`, :func:`eigenmodes`, :func:`coefficients`, :func:`closure`, :func:`flow_statistics`,
:func:`parameter_sweep`. Each returns a result with the numbers as attributes, ``to_xarray()``,
``to_netcdf(path)`` and ``figure(path)``; nothing is printed unless ``progress`` asks for it.
"""

from kindyn._version import __version__

_ENTRY_POINTS = ("closure", "coefficients", "eigenmodes", "flow_statistics", "growth", "load_case", "parameter_sweep")
__all__ = ["__version__", *_ENTRY_POINTS]


def __getattr__(name):
    if name in _ENTRY_POINTS:
        from kindyn import api

        return getattr(api, name)
    raise AttributeError(f"module 'kindyn' has no attribute {name!r}")
