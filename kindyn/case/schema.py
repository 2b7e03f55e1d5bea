"""The keys a case file may contain, their types, defaults and meanings.

A section is a mapping ``key -> Key``. A :class:`Key` converts a TOML value or raises
``ValueError(expected)`` with what is allowed; the loader adds file, section and key. Sections
owned by other modules (test fields, sweeps, eigenmodes) register their own key tables in
:data:`SECTIONS` from :mod:`kindyn.case.sections`.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Callable

from kindyn.array_kernels import KERNEL_SETS, numba_unavailable_reason

REQUIRED = object()

_PI_PATTERN = re.compile(r"^\s*(?:(?P<num>[0-9.eE+-]+)\s*\*?\s*)?pi\s*(?:/\s*(?P<den>[0-9.eE+-]+))?\s*$")


def _number(value) -> float:
    if isinstance(value, bool):
        raise ValueError("a number")
    if isinstance(value, (int, float)):
        if not math.isfinite(value):
            raise ValueError("a finite number")
        return float(value)
    if isinstance(value, str):
        match = _PI_PATTERN.match(value)
        if match:
            try:
                num = float(match["num"]) if match["num"] else 1.0
                den = float(match["den"]) if match["den"] else 1.0
                value = num * math.pi / den
            except (ValueError, ZeroDivisionError):
                raise ValueError("a finite multiple of pi such as \"2*pi\" or \"pi/2\"") from None
            if not math.isfinite(value):
                raise ValueError("a finite multiple of pi such as \"2*pi\" or \"pi/2\"")
            return value
    raise ValueError("a number (or a multiple of pi written as \"2*pi\", \"pi/2\")")


def number(value) -> float:
    return _number(value)


def positive(value) -> float:
    v = _number(value)
    if v <= 0:
        raise ValueError("a positive number")
    return v


def non_negative(value) -> float:
    v = _number(value)
    if v < 0:
        raise ValueError("a number >= 0")
    return v


def integer(value) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise ValueError("a whole number")
    return value


def positive_integer(value) -> int:
    v = integer(value)
    if v < 1:
        raise ValueError("a whole number >= 1")
    return v


def boolean(value) -> bool:
    if not isinstance(value, bool):
        raise ValueError("true or false")
    return value


def string(value) -> str:
    if not isinstance(value, str):
        raise ValueError("a string")
    return value


def file_stem(value) -> str:
    """A plain file name: not empty, no folder separators, not '.' or '..'."""
    if not isinstance(value, str) or not value.strip() or "/" in value or "\\" in value or value in (".", ".."):
        raise ValueError("a plain file name without folders (letters, digits, '-', '_', '.')")
    return value


def choice(*options: str) -> Callable:
    def convert(value):
        if value not in options:
            raise ValueError("one of " + ", ".join(f'"{o}"' for o in options))
        return value
    return convert


def kernel_set(value):
    """An array-kernel set of :mod:`kindyn.array_kernels`; ``"numba"`` only where numba can be imported."""
    value = choice(*KERNEL_SETS)(value)
    reason = numba_unavailable_reason() if value == "numba" else None
    if reason:
        raise ValueError(f'"auto" or "numpy": {reason} (pip install "kindyn[fast]")')
    return value


def list_of(convert_one: Callable, what: str, length: int | None = None) -> Callable:
    """A TOML list converted item by item: ``length`` items, or any non-empty list when ``None``."""
    count = {2: "two", 3: "three"}.get(length, str(length))
    expected = f"a list of {count} {what}" if length else f"a non-empty list of {what}"

    def convert(value):
        if not isinstance(value, list) or not value or (length and len(value) != length):
            raise ValueError(expected)
        try:
            return tuple(convert_one(v) for v in value)
        except ValueError:
            raise ValueError(expected) from None
    return convert


def triple(convert_one: Callable, what: str) -> Callable:
    return list_of(convert_one, what, length=3)


@dataclass(frozen=True)
class Key:
    convert: Callable
    default: object = REQUIRED
    doc: str = ""


DOMAIN = {
    "lengths": Key(triple(positive, "positive numbers"), (2 * math.pi,) * 3,
                   "box lengths [Lx, Ly, Lz]; numbers or multiples of pi such as \"2*pi\""),
    "grid": Key(triple(positive_integer, "whole numbers >= 1"), REQUIRED, "grid points [nx, ny, nz]"),
}

MAGNETIC = {
    "eta": Key(positive, None, "magnetic diffusivity (give exactly one of eta and Rm)"),
    "Rm": Key(positive, None, "magnetic Reynolds number U/(eta k_f) with the flow's U and k_f"),
    "seed": Key(integer, 1, "seed of the random initial field"),
    "initial_field": Key(choice("random", "flow"), "random",
                         "random: seeded solenoidal noise with zero mean; flow: B(0) = u"),
    "initial_peak": Key(positive, None, "wavenumber where the random initial spectrum peaks (default: the flow's k_f)"),
}

RUN = {
    "scheme": Key(choice("rk4", "rk3", "rk2"), "rk4", "Runge–Kutta scheme in integrating-factor form"),
    "cfl": Key(positive, 1.0, "time step = cfl / sum_i(max|u_i| k_max,i) (RK4 is stable up to about 2.8)"),
    "time_step": Key(positive, None, "fixed time step; overrides cfl"),
    "sample_interval": Key(positive, None,
                           "time between samples of the energy (default 0.25/(U k_f)); ignored for periodic and renovating "
                           "flows, which are sampled 8 times per period or renewal"),
    "tolerance": Key(positive, None, "absolute tolerance on the growth rate (default 1e-4 U k_f)"),
    "min_time": Key(non_negative, 0.0, "never stop before this simulation time"),
    "max_time": Key(positive, None, "stop at this simulation time even if not converged (default 2000/(U k_f))"),
    "max_steps": Key(positive_integer, 10_000_000, "stop after this many steps even if not converged"),
    "checkpoint_seconds": Key(positive, 120.0, "wall-clock seconds between checkpoints"),
    "resolution_threshold": Key(positive, 0.03,
                                "warn when the spectrum at the dealiasing cut-off exceeds this fraction of its peak"),
}

NUMERICS = {
    "fft": Key(choice("fftw", "scipy"), "fftw", "transform engine"),
    "threads": Key(positive_integer, 1, "threads of the FFTs and of the compiled array kernels"),
    "planning": Key(choice("estimate", "measure", "patient"), "measure", "FFTW planning effort"),
    "precision": Key(choice("double", "single"), "double", "floating-point precision of the fields"),
    "array_kernels": Key(kernel_set, "auto",
                         "array kernels of the step beside the FFTs: numba (fused loops, the `fast` extra; "
                         "on `threads` threads or one, whichever is measured faster), numpy, or auto "
                         "(numba when it works here)"),
}

OUTPUT = {
    "name": Key(file_stem, None, "base name of the output files (default: the case file's stem)"),
    "figure": Key(boolean, True, "write PNG figures"),
    "field": Key(boolean, True, "write the final field on the grid to the netCDF file"),
}

SECTIONS: dict[str, dict[str, Key]] = {
    "domain": DOMAIN,
    "magnetic": MAGNETIC,
    "run": RUN,
    "numerics": NUMERICS,
    "output": OUTPUT,
}
