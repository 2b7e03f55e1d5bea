"""Read a TOML case file into a validated, frozen :class:`CaseConfig`, without building anything.

Every problem raises :class:`~kindyn.errors.CaseError` naming the file, the dotted key, the bad
value and what is expected. ``--set section.key=value`` overrides are applied to the parsed TOML
(values typed as TOML; a bare word is taken as a string) before validation, so they are checked
exactly like the file; an error in an overridden key names the override, not the file.

:func:`read_config` checks every section against its dataclass (:mod:`kindyn.case.sections`) and
the ``[flow]`` table against the flow registry (type known; for flows built from their dataclass
fields, the keys known and typed). It builds neither the box nor the flow (that is
:func:`kindyn.case.load.load_case`), and imports nothing heavier than numpy and the registries.
"""

from __future__ import annotations

import contextlib
import dataclasses
import stat
import tomllib
import typing
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType

from kindyn.case import schema
from kindyn.case.cluster_section import ClusterConfig
from kindyn.case.modes_section import ModesConfig
from kindyn.case.schema import DomainConfig, MagneticConfig, NumericsConfig, OutputConfig, RunConfig
from kindyn.case.sections import FREEFORM_SECTIONS, SECTIONS
from kindyn.case.sweep_section import SweepSpec
from kindyn.case.testfield_section import TestfieldConfig
from kindyn.errors import MISSING, CaseError


@dataclass(frozen=True, kw_only=True)
class CaseConfig:
    """A validated case file: every section, and the ``[flow]`` table (type and parameters).

    ``flow_params`` are the ``[flow]`` keys without ``type``: converted to the types of the flow
    dataclass's fields, or as written for flows that validate their own table when built
    (``from_case``, see :func:`kindyn.flows.make_flow`).
    """

    path: str
    text: str
    overrides: tuple[str, ...]
    domain: DomainConfig
    magnetic: MagneticConfig
    run: RunConfig
    numerics: NumericsConfig
    output: OutputConfig
    testfield: TestfieldConfig
    modes: ModesConfig
    cluster: ClusterConfig
    sweep: SweepSpec
    flow_type: str
    flow_params: dict

    @property
    def name(self) -> str:
        """Base name of the output files: ``[output] name``, else the case file's stem."""
        return self.output.name if self.output.name else Path(self.path).stem

    @property
    def sections(self) -> Mapping[str, object]:
        """Section name -> validated section, in the order of :data:`kindyn.case.sections.SECTIONS`
        (then the free-form sections); a read-only view built from the fields."""
        return MappingProxyType({name: getattr(self, name) for name in (*SECTIONS, *FREEFORM_SECTIONS)})


def parse_override(text: str, file: str = "--set") -> tuple[list[str], object]:
    """``"section.key=value"`` -> (``["section", "key"]``, typed value)."""
    if "=" not in text:
        raise CaseError(file, text, MISSING, "an override written section.key=value")
    key, raw = text.split("=", 1)
    parts = _key_path(key.strip())
    if parts is None or len(parts) < 2 or not all(parts):
        raise CaseError(file, key.strip(), raw, "a dotted key section.key (quote keys that contain dots: "
                                               'sweep."magnetic.Rm")')
    try:
        document = tomllib.loads(f"v = {raw.strip()}")
    except tomllib.TOMLDecodeError:
        value = raw.strip()
    except (ValueError, RecursionError, MemoryError) as exc:  # e.g. an integer of 100000 digits
        raise CaseError(file, key.strip(), raw.strip(), f"a TOML value ({_parse_problem(exc)})") from None
    else:
        if set(document) != {"v"}:  # more than a value: further lines with keys or tables
            raise CaseError(file, key.strip(), raw.strip(), "a single TOML value (no further lines, keys or tables)")
        value = document["v"]
    check_depth(value, file, key.strip())
    return parts, value


def _key_path(key: str) -> list[str] | None:
    """The parts of a TOML dotted key (``sweep."magnetic.Rm"`` -> ``["sweep", "magnetic.Rm"]``)."""
    try:
        node = tomllib.loads(f"{key} = 0")
    except (ValueError, RecursionError):  # tomllib.TOMLDecodeError is a ValueError
        return None
    parts = []
    while isinstance(node, dict) and len(node) == 1:
        (name, node), = node.items()
        parts.append(name)
    return parts if node == 0 else None


EXCLUSIVE_KEYS = {("magnetic", "eta"): ("magnetic", "Rm"), ("magnetic", "Rm"): ("magnetic", "eta")}


def known_sections() -> set[str]:
    """The section names a case may have."""
    return set(SECTIONS) | set(FREEFORM_SECTIONS) | {"flow"}


def apply_overrides(data: dict, overrides, file: str = "") -> dict:
    """Apply ``section.key=value`` overrides; setting eta drops Rm from the file and vice versa. An
    override of a section no case has is refused here, naming ``--set`` (over ``file``), not the file."""
    for text in overrides:
        parts, value = parse_override(text)
        if parts[0] not in known_sections():
            raise CaseError(f"--set (over {file})" if file else "--set", parts[0], "[section]",
                            "a known section: " + ", ".join(sorted(known_sections())))
        rival = EXCLUSIVE_KEYS.get(tuple(parts))
        if rival and isinstance(data.get(rival[0]), dict):
            data[rival[0]].pop(rival[1], None)
        node = data
        for part in parts[:-1]:
            node = node.setdefault(part, {})
            if not isinstance(node, dict):
                raise CaseError("--set", ".".join(parts), value, f"{'.'.join(parts[:-1])} to be a section")
        node[parts[-1]] = value
    return data


MAX_CASE_BYTES = 4 * 2**20  # a case file is a page of keys; anything this large is not one


def read_toml(path) -> tuple[str, dict]:
    """``(text, data)`` of the case file ``path``: a regular UTF-8 file of at most
    :data:`MAX_CASE_BYTES` (never a FIFO or a device, which could block or never end)."""
    path = Path(path)
    try:
        info = path.stat()
        if not stat.S_ISREG(info.st_mode):
            raise CaseError(str(path), "", MISSING, "a case file (this is a folder or a special file)")
        if info.st_size > MAX_CASE_BYTES:
            raise CaseError(str(path), "", MISSING, f"a case file of at most {MAX_CASE_BYTES // 2**20} MiB "
                            f"(this one has {info.st_size / 2**20:.3g} MiB)")
        with open(path, encoding="utf-8") as stream:
            text = stream.read(MAX_CASE_BYTES + 1)
    except FileNotFoundError:
        raise CaseError(str(path), "", MISSING, "an existing case file (not found)") from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise CaseError(str(path), "", MISSING, f"a readable UTF-8 TOML file ({exc})") from None
    return text, parse_toml(text, str(path))


MAX_DEPTH = 8  # tables and arrays nested inside a section: the deepest a case needs is 3


def _parse_problem(exc: BaseException) -> str:
    if isinstance(exc, RecursionError):
        return "nested too deeply"
    if isinstance(exc, MemoryError):
        return "too large to read"
    if "integer string conversion" in str(exc):  # Python's limit on the digits of an integer
        return "an integer of more than 4300 digits"
    return str(exc)


def parse_toml(text: str, file: str) -> dict:
    """The TOML ``text`` of ``file`` parsed, and checked for absurd nesting (see :func:`check_depth`).

    Every failure of the parser (syntax, an integer of thousands of digits, nesting deep enough to
    exhaust the interpreter's stack) is a :class:`CaseError`.
    """
    try:
        data = tomllib.loads(text)
    except (ValueError, RecursionError, MemoryError) as exc:  # tomllib.TOMLDecodeError is a ValueError
        raise CaseError(file, "", MISSING, f"valid TOML ({_parse_problem(exc)})") from None
    check_depth(data, file)
    return data


def check_depth(value, file: str, key: str = "", limit: int = MAX_DEPTH) -> None:
    """Refuse tables or arrays nested more than ``limit`` levels below ``key`` (iteratively, so that
    a deep value cannot exhaust the stack here or in a later ``repr``)."""
    stack = [(value, key, 0)]
    while stack:
        node, where, depth = stack.pop()
        if isinstance(node, dict):
            items = [(v, f"{where}.{k}" if where else str(k)) for k, v in node.items()]
        elif isinstance(node, list):
            items = [(v, f"{where}[{i}]") for i, v in enumerate(node)]
        else:
            continue
        if depth > limit + (1 if not key else 0):
            raise CaseError(file, where or key, "[...]", f"tables or arrays nested at most {limit} deep")
        stack.extend((v, w, depth + 1) for v, w in items)


def read_config(path, overrides=(), text: str | None = None) -> CaseConfig:
    """Read, override and validate a case file (``text``: its content, already read)."""
    if text is None:
        text, data = read_toml(path)
    else:
        data = parse_toml(text, str(path))
    data = apply_overrides(data, overrides, str(path))
    return validate_config(data, str(path), text, tuple(overrides))


@contextlib.contextmanager
def naming_overrides(file: str, overrides):
    """An error in a key set by ``--set`` names the override (``--set (over FILE)``), not the file."""
    try:
        yield
    except CaseError as exc:
        overridden = {".".join(parse_override(o)[0]) for o in overrides}
        if exc.key in overridden:
            raise CaseError(f"--set (over {file})", exc.key, exc.value, exc.expected) from None
        raise


def validate_config(data: dict, file: str, text: str = "", overrides=()) -> CaseConfig:
    """Validate parsed TOML (overrides already applied) into a :class:`CaseConfig`."""
    with naming_overrides(file, overrides):
        return _validate(data, file, text, tuple(overrides))


def _validate(data: dict, file: str, text: str, overrides: tuple[str, ...]) -> CaseConfig:
    known = known_sections()
    for name, value in data.items():
        if name not in known:
            raise CaseError(file, name, "[section]", "a known section: " + ", ".join(sorted(known)))
        if not isinstance(value, dict):
            raise CaseError(file, name, value, f"[{name}] to be a table of keys")
    sections = {name: schema.build_section(cls, data.get(name, {}), name, file) for name, cls in SECTIONS.items()}
    for name, validator in FREEFORM_SECTIONS.items():
        sections[name] = validator(data.get(name), file)
    flow_type, flow_params = validate_flow_table(data.get("flow"), file)
    check_one_diffusivity(sections["magnetic"], file)
    return CaseConfig(path=file, text=text, overrides=overrides, **sections,
                      flow_type=flow_type, flow_params=flow_params)


def check_one_diffusivity(magnetic: MagneticConfig, file: str) -> None:
    """Exactly one of ``magnetic.eta`` and ``magnetic.Rm`` (the other follows from the flow's U, k_f)."""
    eta, Rm = magnetic.eta, magnetic.Rm
    if (eta is None) == (Rm is None):
        raise CaseError(file, "magnetic.eta" if eta is not None else "magnetic", eta if eta is not None else MISSING,
                        "exactly one of magnetic.eta and magnetic.Rm")


def validate_flow_table(raw, file: str) -> tuple[str, dict]:
    """The ``[flow]`` table -> (type, parameters): the type must be registered; a flow built from
    its dataclass fields gets its keys checked and converted to the fields' types."""
    from kindyn.flows import FLOW_TYPES

    if raw is None:
        raise CaseError(file, "flow", MISSING, "a [flow] section with a type")
    params = dict(raw)
    flow_type = params.pop("type", MISSING)
    if not isinstance(flow_type, str) or flow_type not in FLOW_TYPES:
        raise CaseError(file, "flow.type", flow_type, "one of " + ", ".join(f'"{t}"' for t in FLOW_TYPES))
    cls = FLOW_TYPES[flow_type]
    if not hasattr(cls, "from_case"):
        hints = typing.get_type_hints(cls)
        allowed = [f.name for f in dataclasses.fields(cls)]
        for key, value in params.items():
            if key not in allowed:
                raise CaseError(file, f"flow.{key}", value,
                                f"a parameter of the {flow_type} flow: " + ", ".join(allowed))
            params[key] = _convert_field(value, hints[key], key, file)
    return flow_type, params


def _convert_field(value, annotation, key, file):
    text = str(annotation)
    try:
        if "tuple" in text:
            if not isinstance(value, list) or not value:
                raise ValueError("a non-empty list of numbers")
            return tuple(schema.number(v) for v in value)
        if text in ("float", "<class 'float'>"):
            return schema.number(value)
        if text in ("int", "<class 'int'>"):
            return schema.integer(value)
        if text in ("str", "<class 'str'>"):
            return schema.string(value)
        if text in ("bool", "<class 'bool'>"):
            return schema.boolean(value)
    except ValueError as exc:
        raise CaseError(file, f"flow.{key}", value, str(exc)) from None
    return value
