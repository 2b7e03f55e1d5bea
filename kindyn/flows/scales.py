"""The Rm rule: where every flow's ``U`` and ``k_f`` in ``Rm = U/(eta k_f)`` come from.

One rule for every flow, stated in the output as :func:`scale_rule` (``scale_rule`` of the JSON,
netCDF and text outputs):

1. **Built-in flows declare U and k_f** as their published amplitude and wavenumber (each class's
   ``scale_rule`` text says how; e.g. ABC: ``U = sqrt((A^2+B^2+C^2)/3)``, ``k_f = k``, so the
   1:1:1 ABC flow has ``Rm = 1/eta``; design.md section 1).
2. **User flows** (formula, callable, velocity file) take ``U`` and ``k_f`` from the case
   (``flow.U``, ``flow.k_f``) when given. A velocity file written by ``kindyn flow`` carries the
   ``U`` and ``k_f`` of the flow it was written from as global attributes, and they are read back
   (the case's keys win), so a round trip keeps Rm.
3. **With ``magnetic.Rm`` a user flow must declare both** (case keys or file attributes): Rm is the
   control parameter and a measured convention would silently change eta for flows whose
   published U is not what is measured (Roberts, Taylor–Green). :func:`require_declared` refuses
   otherwise, with the measured candidates in the message.
4. **With ``magnetic.eta`` the undeclared scales are measured** from the sample at ``t = 0``
   (fluctuating part, k != 0)::

       U   = sqrt(<|u - <u>|^2> / 3)          (rms of one component)
       k_f = sum_k |k| E_k / sum_k E_k        (energy-weighted mean wavenumber, k != 0)

   This default reproduces the declarations of the ABC family (any A, B, C, k), the Beltrami sums
   and the Galloway–Proctor flow (``<u^2> = 3 U^2``, single shell ``|k| = k``), and only affects
   the reported Rm (eta is given). Whatever the rule, ``Rm_rms = u_rms/(eta k_f)`` with the 3-D
   ``u_rms = sqrt(<|u|^2>)`` is reported beside Rm.
"""

from __future__ import annotations

import math

import numpy as np

from kindyn.errors import MISSING, ParameterError

SPEED_SCALE_SPREAD = 1e6  # a declared U and the samples' u_rms may differ by conventions (factors of order 1), not by this
DECLARED_BY_CASE = "declared in the case (flow.U, flow.k_f)"
DECLARED_BY_FILE = "declared in the velocity file (global attributes U, k_f)"
MEASURED = ("measured (U = sqrt(<|u - <u>|^2>/3), the rms of one component; k_f = energy-weighted mean |k|; "
            "from the flow at t = 0 on the grid, because flow.U, flow.k_f were not given)")


def scale_rule(flow) -> str:
    """How the flow's U and k_f were obtained (a short sentence for every output)."""
    return getattr(flow, "scale_rule", None) or "declared by the flow type"


def measured_scales(u_hat: np.ndarray, box) -> tuple[float, float]:
    """``(sqrt(<|u - <u>|^2>/3), energy-weighted mean |k|)`` of half-grid coefficients (k = 0 left out)."""
    density = box.parseval_weights * sum(np.abs(c) ** 2 for c in u_hat)
    k = np.sqrt(box.k_squared)
    fluctuating = float(density[k > 0].sum())
    k_f = float((density * k).sum()) / fluctuating if fluctuating > 0 else math.nan
    return math.sqrt(fluctuating / 3.0), k_f


def rms_speed(u_hat: np.ndarray, box) -> float:
    """``u_rms = sqrt(<|u|^2>)`` (3-D, the mean included) of half-grid coefficients (scaled by the
    largest coefficient first, so that tiny and huge flows neither under- nor overflow)."""
    top = float(np.max(np.abs(u_hat))) if np.size(u_hat) else 0.0
    if not top > 0 or not math.isfinite(top):
        return top if math.isfinite(top) else math.inf
    return top * math.sqrt(float(np.sum(box.parseval_weights * sum(np.abs(c / top) ** 2 for c in u_hat))))


def _declared(value, key: str, where: str):
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not (value > 0 and math.isfinite(value)):
        raise ParameterError(key, value, f"a positive finite number ({where})")
    return float(value)


def resolve_scales(params: dict, u_hat, box, file_scales=(None, None), steady: bool = True):
    """``(U, k_f, rule, measured_keys)``: the case's keys, else the file's attributes, else measured.

    ``measured_keys`` lists the keys (``"U"``, ``"k_f"``) that were measured; the case loader
    refuses them when ``magnetic.Rm`` is given (:func:`require_declared`). A steady flow must not
    be zero, and a declared ``U`` must be within a factor :data:`SPEED_SCALE_SPREAD` of the samples'
    ``u_rms`` (a time-dependent flow may pass through zero at t = 0: not checked).
    """
    measured = measured_scales(u_hat, box)
    u_rms = rms_speed(u_hat, box)
    if steady and not u_rms > 0:
        raise ParameterError("U", params.get("U", MISSING), "a flow that is not zero everywhere (its samples "
                             "at t = 0 are all 0: pure diffusion, and Rm = U/(eta k_f) has no meaning)")
    values, sources, missing = [], [], []
    for i, key in enumerate(("U", "k_f")):
        value = _declared(params.get(key), key, "the flow's scale in Rm = U/(eta k_f)")
        source = "case"
        if value is None and file_scales[i] is not None:
            value = _declared(file_scales[i], key, "the velocity file's attribute")
            source = "file"
        if value is None:
            value, source = measured[i], "measured"
            missing.append(key)
            if not (value > 0 and math.isfinite(value)):
                raise ParameterError(key, MISSING, f"a positive number (the flow's measured {key} is {value:g}; "
                                     "a flow with no fluctuating part cannot drive a dynamo)")
        values.append(value)
        sources.append(source)
    ratio = values[0] / u_rms if u_rms > 0 else math.inf
    if steady and not 1.0 / SPEED_SCALE_SPREAD <= ratio <= SPEED_SCALE_SPREAD:
        key = "U" if sources[0] == "case" else "file"
        raise ParameterError(key, values[0], f"the flow's speed scale: its samples at t = 0 have u_rms = {u_rms:.3g}, "
                             f"{ratio:.3g} times apart from U (at most {SPEED_SCALE_SPREAD:g}; Rm = U/(eta k_f) "
                             "and the time step would describe another flow)")
    return values[0], values[1], _rule_text(sources), tuple(missing)


def _rule_text(sources) -> str:
    if sources == ["case", "case"]:
        return DECLARED_BY_CASE
    if sources == ["file", "file"]:
        return DECLARED_BY_FILE
    if sources == ["measured", "measured"]:
        return MEASURED
    names = {"case": "declared in the case", "file": "declared in the velocity file",
             "measured": "measured"}
    text = f"U {names[sources[0]]}, k_f {names[sources[1]]}"
    if "measured" in sources:
        text += " (measured: U = sqrt(<|u - <u>|^2>/3), k_f = energy-weighted mean |k|, at t = 0)"
    return text


def require_declared(flow, Rm_given: bool) -> None:
    """Raise when ``magnetic.Rm`` is given but the flow's U or k_f was measured (rule 3)."""
    missing = tuple(getattr(flow, "measured_scales", ()) or ())
    if not Rm_given or not missing:
        return
    u_rms = getattr(flow, "u_rms", math.nan)
    raise ParameterError(missing[0], MISSING,
                         "flow.U and flow.k_f, the speed and wavenumber in Rm = U/(eta k_f), when magnetic.Rm is "
                         f"given (kindyn does not guess what Rm means for a user flow; measured here: "
                         f"u_rms = {u_rms:.6g}, sqrt(<|u - <u>|^2>/3) = {flow.speed:.6g}, energy-weighted mean "
                         f"|k| = {flow.wavenumber:.6g}; the abc type declares U = 1, k_f = 1 for A = B = C = 1, "
                         "k = 1), or give magnetic.eta instead")
