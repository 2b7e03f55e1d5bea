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
from kindyn.limits import MAGNITUDE, MAX_INTEGER, MAX_MAGNITUDE, in_range  # kindyn/limits.py: why
from kindyn.stepping import TABLEAUX
from kindyn.transforms import ENGINES, PLANNING_EFFORTS, PRECISIONS

REQUIRED = object()

_PI_PATTERN = re.compile(r"^\s*(?:(?P<num>[0-9.eE+-]+)\s*\*?\s*)?pi\s*(?:/\s*(?P<den>[0-9.eE+-]+))?\s*$")


MAX_THREADS = 4096  # numerics.threads, whatever the machine (the loader also checks the cores here)


def _in_range(v: float, what: str | None = None) -> float:
    if not math.isfinite(v):
        raise ValueError(what or "a finite number")
    if not in_range(v):
        raise ValueError(what or f"a number of magnitude {MAGNITUDE} (or 0)")
    return v


def _number(value, what: str | None = None) -> float:
    """``value`` as a float in the case range; ``what`` replaces the message of a range error."""
    if isinstance(value, bool):
        raise ValueError("a number")
    if isinstance(value, int):
        if abs(value) > MAX_MAGNITUDE:
            raise ValueError(what or f"a number of magnitude {MAGNITUDE} (or 0)")
        return _in_range(float(value), what)
    if isinstance(value, float):
        return _in_range(value, what)
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
            return _in_range(value, what)
    raise ValueError("a number (or a multiple of pi written as \"2*pi\", \"pi/2\")")


def number(value) -> float:
    return _number(value)


def positive(value) -> float:
    v = _number(value, f"a positive number {MAGNITUDE}")
    if v <= 0:
        raise ValueError(f"a positive number {MAGNITUDE}")
    return v


def fraction_below(limit: float, what: str) -> Callable:
    """A positive number below ``limit`` (< 1): tolerances and thresholds that are fractions."""
    def convert(value) -> float:
        v = _number(value, f"{what}: a positive number below {limit:g}")
        if not 0 < v < limit:
            raise ValueError(f"{what}: a positive number below {limit:g}")
        return v
    return convert


def non_negative(value) -> float:
    v = _number(value)
    if v < 0:
        raise ValueError("a number >= 0")
    return v


def integer(value) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise ValueError("a whole number")
    if abs(value) > MAX_INTEGER:
        raise ValueError("a whole number below 2**63")
    return value


def positive_integer(value) -> int:
    v = integer(value)
    if v < 1:
        raise ValueError("a whole number >= 1")
    return v


def bounded_integer(low: int, high: int) -> Callable:
    """A whole number from ``low`` to ``high``."""
    def convert(value) -> int:
        try:
            v = integer(value)
        except ValueError:
            v = None
        if v is None or not low <= v <= high:
            raise ValueError(f"a whole number >= {low} and <= {high}")
        return v
    return convert


def seed(value) -> int:
    """A random seed: a whole number from 0 to 2**63 - 1 (numpy's generators take no negative seeds)."""
    try:
        v = integer(value)
    except ValueError:
        v = -1
    if v < 0:
        raise ValueError("a whole number >= 0 (below 2**63)")
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
    """A plain file name: not empty, no folder separators, not '.' or '..', no control characters
    (NUL cannot be in a file name; the others would garble the lines that name the file)."""
    if not isinstance(value, str) or not value.strip() or "/" in value or "\\" in value or value in (".", ".."):
        raise ValueError("a plain file name without folders (letters, digits, '-', '_', '.')")
    if any(ord(c) < 32 or ord(c) == 127 for c in value):
        raise ValueError("a plain file name without NUL or other control characters (letters, digits, '-', '_', '.')")
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


MAX_LIST = 1000  # items of a list-valued key (each item is at least one solve or one field)


def list_of(convert_one: Callable, what: str, length: int | None = None, longest: int = MAX_LIST) -> Callable:
    """A TOML list converted item by item: ``length`` items, or a non-empty list of at most
    ``longest`` items when ``None``."""
    count = {2: "two", 3: "three"}.get(length, str(length))
    expected = f"a list of {count} {what}" if length else f"a non-empty list of at most {longest} {what}"

    def convert(value):
        if not isinstance(value, list) or not value or (length and len(value) != length) or len(value) > longest:
            raise ValueError(expected)
        items = []
        for i, v in enumerate(value):
            try:
                items.append(convert_one(v))
            except ValueError as exc:
                detail = str(exc)
                raise ValueError(expected if detail in expected else f"{expected} (item {i + 1}: {detail})") from None
        return tuple(items)
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
    seed: int = setting(seed, 1, "seed of the random initial field")
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
        fraction_below(1.0, "a fraction of the spectrum's peak"), 0.03,
        "warn when the spectrum at the dealiasing cut-off exceeds this fraction of its peak")


def _process_grid(value) -> tuple[int, int]:
    """``[P1, P2]``: two whole numbers >= 1."""
    expected = "[P1, P2]: two whole numbers >= 1 (a pencil process grid)"
    if not isinstance(value, list) or len(value) != 2:
        raise ValueError(expected)
    if not all(isinstance(v, int) and not isinstance(v, bool) and 1 <= v <= MAX_THREADS * 256 for v in value):
        raise ValueError(expected)
    return tuple(value)


@dataclass(frozen=True, kw_only=True)
class NumericsConfig(SectionConfig):
    """``[numerics]``: how the grid arithmetic is done (transforms, threads, precision, kernels)."""

    fft: str = setting(choice(*ENGINES), "fftw", "transform engine")
    threads: int = setting(bounded_integer(1, MAX_THREADS), 1,
                           "threads of the FFTs and of the compiled array kernels (at most the cores here)")
    planning: str = setting(choice(*PLANNING_EFFORTS), "measure", "FFTW planning effort")
    precision: str = setting(choice(*PRECISIONS), "double", "floating-point precision of the fields")
    array_kernels: str = setting(
        kernel_set, "auto",
        "array kernels of the step beside the FFTs: numba (fused loops, the `fast` extra; "
        "on `threads` threads or one, whichever is measured faster), numpy, or auto "
        "(numba when it works here)")
    decomposition: str = setting(
        choice("auto", "slab", "pencil"), "auto",
        "how mpi4py-fft splits the grid over MPI processes (runs launched with mpiexec or srun): a slab over "
        "x, a pencil over x and y, or auto (slab while it fits, else pencil)")
    process_grid: tuple | None = setting(
        _process_grid, None, "[P1, P2]: the pencil's process grid (their product is the number of processes)")


FIGURE_FORMATS = ("png", "pdf", "svg")
FIGURE_INCHES = (1.0, 40.0)  # a figure's width and height: from a thumbnail to a poster panel


def figure_size(value) -> tuple[float, float]:
    """``[width, height]`` in inches, each between :data:`FIGURE_INCHES`."""
    low, high = FIGURE_INCHES
    expected = f"[width, height] in inches, each between {low:g} and {high:g}"
    if not isinstance(value, list) or len(value) != 2:
        raise ValueError(expected)
    sizes = tuple(_number(v, expected) for v in value)
    if not all(low <= v <= high for v in sizes):
        raise ValueError(expected)
    return sizes


@dataclass(frozen=True, kw_only=True)
class OutputConfig(SectionConfig):
    """``[output]``: file names and what is written."""

    name: str | None = setting(file_stem, None, "base name of the output files (default: the case file's stem)")
    figure: bool = setting(boolean, True, "write figures")
    field: bool = setting(boolean, True, "write the final field on the grid to the netCDF file")
    figure_format: str = setting(choice(*FIGURE_FORMATS), "png", "file format of the figures: png, pdf or svg")
    figure_dpi: int = setting(bounded_integer(50, 1200), 300,
                              "resolution of PNG figures (and of the colour maps inside PDF and SVG), dots per inch")
    figure_size: tuple | None = setting(figure_size, None,
                                        "[width, height] of the figures in inches (default: each figure's own)")

    STYLE_KEYS = ("figure_format", "figure_dpi", "figure_size")

    def as_dict(self) -> dict:
        """The values, without the figure-style keys that are at their defaults: they came after the
        fingerprints of checkpoints and sweep points (:attr:`kindyn.case.Case.fingerprint`), which must
        stay those of the same case written before."""
        values = super().as_dict()
        for f in dataclasses.fields(self):
            if f.name in self.STYLE_KEYS and values[f.name] == f.default:
                del values[f.name]
        return values


# the key tables of the core sections, derived from the fields (``key -> Key``)
DOMAIN = DomainConfig.key_table()
MAGNETIC = MagneticConfig.key_table()
RUN = RunConfig.key_table()
NUMERICS = NumericsConfig.key_table()
OUTPUT = OutputConfig.key_table()
