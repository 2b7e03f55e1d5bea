"""The induction operator: the one place where ``curl(u x B)`` is evaluated.

Split for integrating-factor time stepping, the induction equation reads

    dB/dt = curl(u x B) + eta Lap B       <=>      d b_hat/dt = N(t, b_hat) - eta |k|^2 b_hat

and :class:`InductionOperator` evaluates the non-diffusive part pseudo-spectrally on a layout
(:mod:`kindyn.layout`): the field is brought to the grid, multiplied by ``u(t)`` there,
transformed back, and the curl is taken spectrally on the 2/3-rule band. ``u`` and ``B`` lie in
that band, so the quadratic product is free of aliasing on the kept modes; the result is a curl, so
``div B`` stays at round-off. The diffusion rates ``eta |k|^2`` (:attr:`decay_rates`) go to the
stepper, which integrates them exactly.

The same operator serves every problem kindyn solves, through its parameters:

* the **3-D run** and the **eigen-solves**: ``N b = curl(u x b)`` on a :class:`~kindyn.layout.BoxLayout`;
* the **single-k_z reduction** ("planar" method) of a z-independent flow at fixed ``k_z``: the same on a
  :class:`~kindyn.layout.KzPlaneLayout` (complex ``b``, ``d/dz -> i k_z``);
* the **test problems** of the test-field method, ``n`` stacked fluctuation fields ``b`` about
  prescribed mean test fields ``B_T`` (``mean_field``) with the modes of an average removed
  (``fluctuation_of``)::

      full:   N b = P curl(u x (B_T + b))            SOCA (``soca=True``):   N b = P curl(u x B_T)

  ``P`` removes the modes of the average (planar means, or ``k = 0`` for the box mean), so
  ``curl(f')`` is written ``P curl f`` and ``b`` never acquires a mean. Removing the mean of
  ``u x B_T`` as well (``Ubar x B_T`` belongs to the mean-field equation) is the usual test-field
  formulation with a mean flow kept in the fluctuation equation (Schrinner et al. 2007, Geophys.
  Astrophys. Fluid Dyn. 101, 81; recalled from memory).

``rhs(t, y, out)`` is a pure function of its arguments: the velocity is sampled at ``t`` itself
(cached by that exact time). Flows that are piecewise constant in time (renovating flows) are
handled by the stepper, which evaluates every stage of a step inside the step's renewal interval
(:class:`~kindyn.stepping.IntegratingFactorStepper`, ``constant_between``).

Entry points: :meth:`packed` on the band values packed as :attr:`support` describes (the stepper's),
and ``operator(t, b_hat, out)`` on full spectral arrays (values outside the band are ignored;
``out`` is zero there). Buffers are allocated once; the ``1/N`` of the forward transform is folded
into the curl coefficients ``i k / N`` where the engine allows. The uniform (``k = 0``) component
of ``B`` is left untouched (``k x ... = 0``) and does not diffuse: it is the neutral mode of the
periodic problem.
"""

from __future__ import annotations

import numpy as np

from kindyn.array_kernels.numpy_kernels import NumpyKernels


class InductionOperator:
    """``N(t, b) = P curl(u(t) x (b + B_T))`` on a layout's band, for ``fields`` stacked fields.

    Parameters
    ----------
    layout:
        What this process holds (:mod:`kindyn.layout`); gives wavenumbers, band, engine, coordinates.
    flow:
        The velocity (see :mod:`kindyn.flows.base`), sampled on the layout's points.
    eta:
        Magnetic diffusivity; :attr:`decay_rates` is ``eta |k|^2``.
    kernels:
        The array-kernel set (:func:`kindyn.array_kernels.make_kernels`); numpy by default.
    fields:
        Number of stacked three-component fields (test problems); one for a run.
    mean_field:
        Optional physical mean test fields ``B_T``, shape ``(fields, 3, ...)`` broadcasting to the
        layout's ``physical_shape``; they enter ``u x (B_T + b)``.
    fluctuation_of:
        ``None`` (keep every mode), ``"box"`` (remove ``k = 0``) or an axis ``0, 1, 2`` (remove the
        modes of the planar average that depends on that coordinate).
    soca:
        Drop ``curl(u x b)``: the second-order correlation approximation of the test problems.
    """

    def __init__(self, layout, flow, eta: float, kernels=None, *, fields: int = 1, mean_field=None,
                 fluctuation_of=None, soca: bool = False):
        if soca and mean_field is None:
            raise ValueError("a SOCA operator needs mean test fields")
        self.layout, self.flow, self.eta = layout, flow, float(eta)
        self.kernels = kernels if kernels is not None else NumpyKernels()
        self.fields, self.soca, self.fluctuation_of = int(fields), bool(soca), fluctuation_of
        self.engine = layout.engine(3 * self.fields)
        real_dtype = layout.real_dtype
        self.decay_rates = (self.eta * layout.k_squared).astype(real_dtype)
        self.support = layout.band
        self.shape = self.engine.spectral.shape
        # the pyfftw engines can skip the 1/N pass of their forward transform; other engines normalise
        self._unnormalised = getattr(self.engine, "unnormalised_forward", False)
        scale = 1.0 / layout.points if self._unnormalised else 1.0
        self._curl_wavenumbers = tuple(np.asarray(k * scale, dtype=real_dtype) for k in layout.wavenumbers)
        if fluctuation_of is None:
            self._removed = np.zeros(0, dtype=np.int64)
        else:
            self._removed = layout.band_entries(layout.mean_mode_mask(None if fluctuation_of == "box"
                                                                      else int(fluctuation_of)))
        self.mean_field = None
        if mean_field is not None:
            mean_field = np.asarray(mean_field, dtype=real_dtype)
            if mean_field.shape[:2] != (self.fields, 3):
                raise ValueError(f"mean_field of shape {mean_field.shape} does not hold {self.fields} three-component "
                                 "fields")
            self.mean_field = mean_field
        self._velocity, self._velocity_time = None, None
        self._steady_source = None
        self._band_in = self._band_out = None  # for the full-array entry points only
        self.evaluations = 0

    # --- the velocity -------------------------------------------------------------------------
    def velocity(self, t: float):
        """``u_x, u_y, u_z`` at ``t`` on the layout's points, as the layout samples them (each
        broadcasts to the local grid). Cached: once for a steady flow, by exact time otherwise."""
        if self._velocity_time is None or (not self.flow.steady and t != self._velocity_time):
            self._velocity = self.layout.velocity_components(self.flow, t, self.layout.real_dtype)
            self._velocity_time = t
        return self._velocity

    # --- packed entry point (the stepper's) ---------------------------------------------------
    def packed(self, t: float, b_band: np.ndarray, out: np.ndarray) -> np.ndarray:
        """``N(t, b)`` for band values ``b_band`` ``(3 fields, support.size)``; writes the band values of
        the result into ``out`` and returns it."""
        if self.soca:
            self._source_band(t, out)
        else:
            self._curl_of_cross(t, b_band, self.mean_field is not None, out)
        self.evaluations += 1
        return out

    def timing_probe(self):
        """A callable evaluating ``N`` once on a zero field at ``t = 0`` (for
        :func:`kindyn.array_kernels.choose_threads`); it leaves the evaluation counter as it was."""
        dtype = self.engine.spectral.dtype
        zero = np.zeros((self.shape[0], self.support.size), dtype)
        out = np.empty_like(zero)

        def evaluate():
            evaluations = self.evaluations
            self.packed(0.0, zero, out)
            self.evaluations = evaluations
        return evaluate

    # --- full-array entry points ----------------------------------------------------------------
    def _band_buffers(self):
        if self._band_in is None:
            self._band_in, self._band_out = (np.empty((self.shape[0], self.support.size), self.engine.spectral.dtype)
                                             for _ in range(2))
        return self._band_in, self._band_out

    def _to_full(self, band: np.ndarray, out: np.ndarray) -> np.ndarray:
        out.fill(0)
        return self.support.add_to(band, out)

    def __call__(self, t: float, b_hat: np.ndarray, out: np.ndarray) -> np.ndarray:
        """Write ``N(t, b)`` for the band part of ``b_hat`` (full spectral arrays) into ``out``."""
        band_in, band_out = self._band_buffers()
        self.packed(t, self.support.gather(b_hat, band_in), band_out)
        return self._to_full(band_out, out)

    def homogeneous(self, t: float, b_hat: np.ndarray, out: np.ndarray) -> np.ndarray:
        """``P curl(u(t) x b)`` without the mean test fields (the term SOCA drops); full arrays."""
        band_in, band_out = self._band_buffers()
        self._curl_of_cross(t, self.support.gather(b_hat, band_in), False, band_out)
        self.evaluations += 1
        return self._to_full(band_out, out)

    def source(self, t: float, out: np.ndarray) -> np.ndarray:
        """``P curl(u(t) x B_T)`` for every mean test field; full arrays (cached for a steady flow)."""
        _, band_out = self._band_buffers()
        self._source_band(t, band_out)
        return self._to_full(band_out, out)

    def cross_hat(self, t: float, b_hat: np.ndarray) -> np.ndarray:
        """Normalised Fourier coefficients of ``u(t) x b`` for every stacked field (a new array
        ``(3 fields, *spectral_shape)``); the mean EMF of a test problem is its average."""
        band_in, _ = self._band_buffers()
        self._cross(t, self.support.gather(b_hat, band_in), False)
        spectral = self.engine.spectral
        if self._unnormalised:
            return spectral * (1.0 / self.layout.points)
        return spectral.copy()

    # --- the evaluation -----------------------------------------------------------------------
    def _source_band(self, t: float, out: np.ndarray) -> None:
        if self._steady_source is not None:
            np.copyto(out, self._steady_source)
            return
        self._curl_of_cross(t, None, True, out)
        if self.flow.steady:
            self._steady_source = out.copy()

    def _cross(self, t: float, b_band, add_mean: bool) -> None:
        """``engine.spectral <- (u(t) x (b + B_T))_hat`` (``N`` times that on the unnormalised path)."""
        engine, kernels = self.engine, self.kernels
        if b_band is None:
            engine.real.fill(0)
        else:
            kernels.spectral_from_band(self.support, b_band, engine.spectral)
            engine.backward()
        if add_mean:
            for f in range(self.fields):
                engine.real[3 * f:3 * f + 3] += self.mean_field[f]
        u = self.velocity(t)
        for f in range(self.fields):
            kernels.cross_in_place(u, engine.real[3 * f:3 * f + 3])
        if self._unnormalised:
            engine.forward(normalise=False)
        else:
            engine.forward()

    def _curl_of_cross(self, t: float, b_band, add_mean: bool, out: np.ndarray) -> None:
        """``out <- P curl(u(t) x (b + B_T))`` on the band, packed."""
        self._cross(t, b_band, add_mean)
        spectral = self.engine.spectral
        for f in range(self.fields):
            self.kernels.curl_to_band(self.support, spectral[3 * f:3 * f + 3], self._curl_wavenumbers,
                                      out[3 * f:3 * f + 3])
        if self._removed.size:
            out[:, self._removed] = 0
