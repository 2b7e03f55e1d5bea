"""kindyn: kinematic dynamos of prescribed flows in triply periodic boxes.

Conventions (fixed once for the whole package):

* Induction equation ``dB/dt = curl(u x B) + eta Lap B`` with ``div B = 0`` and ``u`` prescribed.
* Box lengths ``(Lx, Ly, Lz)``, grid ``(nx, ny, nz)``, coordinates ``x_j = j Lx/nx`` (no endpoint).
* Vector fields have axis order ``(component, x, y, z)``; spectral arrays end in ``_hat`` and hold
  Fourier coefficients ``f(x) = sum_k f_hat(k) exp(i k.x)`` on the real-to-complex half grid
  (last axis ``kz >= 0``).
* Magnetic energy ``E_M = <|B|^2>/2``; amplitude ``~ exp(gamma t)``; eigenvalue ``p = gamma + i omega``.
* ``Rm = U/(eta k_f)`` with each flow's declared speed ``U`` and wavenumber ``k_f``.
"""

__version__ = "0.1.0"
