"""The keys a case file may contain, their types, defaults and meanings; the core sections.

A section is a frozen dataclass (a :class:`SectionConfig`) whose fields are its keys, in the order
they are listed in messages. Each field is declared with :func:`setting`, which puts a :class:`Key`
in the field's metadata: a converter that turns a TOML value into the field's type or raises
``ValueError(expected)`` with what is allowed, the default (:data:`REQUIRED`: none) and a
one-line meaning. The key table of a section (``key -> Key``) is derived from the fields
(:meth:`SectionConfig.key_table`), so nothing is written twice. :func:`build_section` validates a raw
TOML table into the dataclass; the converter's message gets the file, section and key. Allowed
words that a registry holds (schemes, transform engines, planning efforts, precisions, array-kernel
sets) are read from that registry. The sections of the other commands live beside these
(:mod:`kindyn.case.modes_section`, :mod:`kindyn.case.testfield_section`,
:mod:`kindyn.case.sweep_section`); all are listed in :mod:`kindyn.case.sections`.
"""

from __future__ import annotations

import dataclasses
import math
import re
from dataclasses import dataclass
from typing import Any, Callable, TypeVar

from kindyn.array_kernels import KERNEL_SETS, numba_unavailable_reason
from kindyn.errors import MISSING, CaseError
from kindyn.stepping import TABLEAUX
from kindyn.transforms import ENGINES, PLANNING_EFFORTS, PRECISIONS

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
        others = " or ".join(f'"{name}"' for name in KERNEL_SETS if name != "numba")
        raise ValueError(f'{others}: {reason} (pip install "kindyn[fast]")')
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
    """One case key: ``convert(toml_value) -> value`` (raises ``ValueError(expected)``), the
    default (:data:`REQUIRED` for none) and the meaning, shown when the key is missing."""

    convert: Callable
    default: object = REQUIRED
    doc: str = ""


def setting(convert: Callable, default: object = REQUIRED, doc: str = "") -> Any:
    """A field of a section dataclass that is a case key (the :class:`Key` goes in its metadata)."""
    key = Key(convert, default, doc)
    if default is REQUIRED:
        return dataclasses.field(metadata={"key": key})
    return dataclasses.field(default=default, metadata={"key": key})


class SectionConfig:
    """Base of the section dataclasses: the key table from the fields, and the values as a dict."""

    __slots__ = ()

    @classmethod
    def key_table(cls) -> dict[str, Key]:
        """``key -> Key`` in declaration order (every field is a key)."""
        return {f.name: f.metadata["key"] for f in dataclasses.fields(cls)}

    def as_dict(self) -> dict:
        """The validated values, ``key -> value`` (for :attr:`kindyn.case.Case.resolved`)."""
        return {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}


Section = TypeVar("Section", bound=SectionConfig)


def validate_section(raw: dict, keys: dict[str, Key], section: str, file: str) -> dict:
    """Convert the raw TOML table of ``[section]`` with its key table: defaults filled in, unknown
    keys and missing required keys refused, each error naming file, ``section.key`` and value."""
    out = {}
    for key, value in raw.items():
        if key not in keys:
            raise CaseError(file, f"{section}.{key}", value,
                            f"a key of [{section}]: " + ", ".join(keys))
    for key, spec in keys.items():
        if key in raw:
            try:
                out[key] = spec.convert(raw[key])
            except ValueError as exc:
                raise CaseError(file, f"{section}.{key}", raw[key], str(exc)) from None
        elif spec.default is REQUIRED:
            raise CaseError(file, f"{section}.{key}", MISSING, spec.doc)
        else:
            out[key] = spec.default
    return out


def build_section(cls: type[Section], raw: dict, section: str, file: str) -> Section:
    """The raw TOML table of ``[section]`` validated into the dataclass ``cls``."""
    return cls(**validate_section(raw, cls.key_table(), section, file))


# ------------------------------------------------------------------------------ the core sections

@dataclass(frozen=True, kw_only=True)
class DomainConfig(SectionConfig):
    """``[domain]``: the periodic box."""

    lengths: tuple[float, float, float] = setting(
        triple(positive, "positive numbers"), (2 * math.pi,) * 3,
        "box lengths [Lx, Ly, Lz]; numbers or multiples of pi such as \"2*pi\"")
    grid: tuple[int, int, int] = setting(triple(positive_integer, "whole numbers >= 1"), REQUIRED,
                                         "grid points [nx, ny, nz]")


@dataclass(frozen=True, kw_only=True)
class MagneticConfig(SectionConfig):
    """``[magnetic]``: the diffusivity (eta or Rm, resolved with the flow by the loader) and B(0)."""

    eta: float | None = setting(positive, None, "magnetic diffusivity (give exactly one of eta and Rm)")
    Rm: float | None = setting(positive, None, "magnetic Reynolds number U/(eta k_f) with the flow's U and k_f")
    seed: int = setting(integer, 1, "seed of the random initial field")
    initial_field: str = setting(choice("random", "flow"), "random",
                                 "random: seeded solenoidal noise with zero mean; flow: B(0) = u")
    initial_peak: float | None = setting(
        positive, None, "wavenumber where the random initial spectrum peaks (default: the flow's k_f)")


@dataclass(frozen=True, kw_only=True)
class RunConfig(SectionConfig):
    """``[run]``: time stepping and when a growth run stops."""

    scheme: str = setting(choice(*TABLEAUX), "rk4", "Runge–Kutta scheme in integrating-factor form")
    cfl: float = setting(positive, 1.0,
                         "time step = cfl / sum_i(max|u_i| k_max,i) (RK4 is stable up to about 2.8)")
    time_step: float | None = setting(positive, None, "fixed time step; overrides cfl")
    sample_interval: float | None = setting(
        positive, None,
        "time between samples of the energy (default 0.25/(U k_f)); ignored for periodic and renovating "
        "flows, which are sampled 8 times per period or renewal")
    tolerance: float | None = setting(positive, None, "absolute tolerance on the growth rate (default 1e-4 U k_f)")
    min_time: float = setting(non_negative, 0.0, "never stop before this simulation time")
    max_time: float | None = setting(
        positive, None, "stop at this simulation time even if not converged (default 2000/(U k_f))")
    max_steps: int = setting(positive_integer, 10_000_000, "stop after this many steps even if not converged")
    checkpoint_seconds: float = setting(positive, 120.0, "wall-clock seconds between checkpoints")
    resolution_threshold: float = setting(
        positive, 0.03, "warn when the spectrum at the dealiasing cut-off exceeds this fraction of its peak")


@dataclass(frozen=True, kw_only=True)
class NumericsConfig(SectionConfig):
    """``[numerics]``: how the grid arithmetic is done (transforms, threads, precision, kernels)."""

    fft: str = setting(choice(*ENGINES), "fftw", "transform engine")
    threads: int = setting(positive_integer, 1, "threads of the FFTs and of the compiled array kernels")
    planning: str = setting(choice(*PLANNING_EFFORTS), "measure", "FFTW planning effort")
    precision: str = setting(choice(*PRECISIONS), "double", "floating-point precision of the fields")
    array_kernels: str = setting(
        kernel_set, "auto",
        "array kernels of the step beside the FFTs: numba (fused loops, the `fast` extra; "
        "on `threads` threads or one, whichever is measured faster), numpy, or auto "
        "(numba when it works here)")


@dataclass(frozen=True, kw_only=True)
class OutputConfig(SectionConfig):
    """``[output]``: file names and what is written."""

    name: str | None = setting(file_stem, None, "base name of the output files (default: the case file's stem)")
    figure: bool = setting(boolean, True, "write PNG figures")
    field: bool = setting(boolean, True, "write the final field on the grid to the netCDF file")


# the key tables of the core sections, derived from the fields (``key -> Key``)
DOMAIN = DomainConfig.key_table()
MAGNETIC = MagneticConfig.key_table()
RUN = RunConfig.key_table()
NUMERICS = NumericsConfig.key_table()
OUTPUT = OutputConfig.key_table()
