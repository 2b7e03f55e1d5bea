"""Read a TOML case file into a validated, frozen :class:`Case` before any computation.

Every problem raises :class:`~kindyn.errors.CaseError` naming the file, the dotted key, the bad
value and what is expected. ``--set section.key=value`` overrides are applied to the parsed TOML
(values typed as TOML; a bare word is taken as a string) before validation, so they are checked
exactly like the file.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import tomllib
import typing
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType

from kindyn.box import Box
from kindyn.case import schema
from kindyn.errors import MISSING, CaseError, ParameterError


# Keys that choose how a result is computed but not the arithmetic: the array-kernel sets compute
# the same operations in the same order (kindyn.array_kernels), so a checkpoint or sweep point made
# with one set stands for the other.
NOT_IN_IDENTITY = (("numerics", "array_kernels"),)


class Section:
    """Read-only attribute view of one validated section (``case.run.cfl``)."""

    def __init__(self, values: dict):
        object.__setattr__(self, "_values", MappingProxyType(dict(values)))

    def __getattr__(self, name):
        try:
            return self._values[name]
        except KeyError:
            raise AttributeError(name) from None

    def __setattr__(self, name, value):
        raise AttributeError("case sections are read-only")

    def as_dict(self) -> dict:
        return dict(self._values)


@dataclass(frozen=True)
class Case:
    """A validated case: the box, the built flow, eta and Rm, and every other section."""

    path: str
    text: str
    overrides: tuple[str, ...]
    box: Box
    flow_type: str
    flow_params: dict
    flow: object
    eta: float
    Rm: float
    sections: dict = field(default_factory=dict)

    def __getattr__(self, name):
        sections = object.__getattribute__(self, "sections")
        if name in sections:
            return sections[name]
        raise AttributeError(name)

    @property
    def name(self) -> str:
        out = self.sections["output"].name
        return out if out else Path(self.path).stem

    @property
    def resolved(self) -> dict:
        """Every value after defaults and overrides (JSON-ready), for identity and provenance."""
        data = {name: section.as_dict() for name, section in self.sections.items()}
        data["domain"] = {"lengths": list(self.box.lengths), "grid": list(self.box.grid)}
        data["flow"] = {"type": self.flow_type, **self.flow_params}
        data["magnetic"] = {**data.get("magnetic", {}), "eta": self.eta, "Rm": self.Rm}
        return json.loads(json.dumps(data, default=_jsonable))

    @property
    def fingerprint(self) -> str:
        """Hash of :attr:`resolved` without the keys of :data:`NOT_IN_IDENTITY`: two cases with the
        same physics and numerics share it (checkpoints and sweep points are found by it)."""
        data = self.resolved
        for section, key in NOT_IN_IDENTITY:
            data.get(section, {}).pop(key, None)
        text = json.dumps(data, sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]


def _jsonable(value):
    if isinstance(value, tuple):
        return list(value)
    return str(value)


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
        value = tomllib.loads(f"v = {raw.strip()}")["v"]
    except tomllib.TOMLDecodeError:
        value = raw.strip()
    return parts, value


def _key_path(key: str) -> list[str] | None:
    """The parts of a TOML dotted key (``sweep."magnetic.Rm"`` -> ``["sweep", "magnetic.Rm"]``)."""
    try:
        node = tomllib.loads(f"{key} = 0")
    except tomllib.TOMLDecodeError:
        return None
    parts = []
    while isinstance(node, dict) and len(node) == 1:
        (name, node), = node.items()
        parts.append(name)
    return parts if node == 0 else None


EXCLUSIVE_KEYS = {("magnetic", "eta"): ("magnetic", "Rm"), ("magnetic", "Rm"): ("magnetic", "eta")}


def apply_overrides(data: dict, overrides) -> dict:
    """Apply ``section.key=value`` overrides; setting eta drops Rm from the file and vice versa."""
    for text in overrides:
        parts, value = parse_override(text)
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


def read_toml(path) -> tuple[str, dict]:
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise CaseError(str(path), "", MISSING, "an existing case file (not found)") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise CaseError(str(path), "", MISSING, f"a readable UTF-8 TOML file ({exc})") from None
    try:
        return text, tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise CaseError(str(path), "", MISSING, f"valid TOML ({exc})") from None


def load_case(path, overrides=(), text: str | None = None) -> Case:
    """Read, override and validate a case file; build the box and the flow."""
    if text is None:
        text, data = read_toml(path)
    else:
        data = tomllib.loads(text)
    data = apply_overrides(data, overrides)
    return validate_case(data, str(path), text, tuple(overrides))


def validate_case(data: dict, file: str, text: str = "", overrides=()) -> Case:
    """Validate parsed TOML; an error in a key set by ``--set`` names the override, not the file."""
    try:
        return _validate(data, file, text, overrides)
    except CaseError as exc:
        overridden = {".".join(parse_override(o)[0]) for o in overrides}
        if exc.key in overridden:
            raise CaseError(f"--set (over {file})", exc.key, exc.value, exc.expected) from None
        raise


def _validate(data: dict, file: str, text: str, overrides) -> Case:
    from kindyn.case.sections import SECTIONS, FREEFORM_SECTIONS

    known = set(SECTIONS) | set(FREEFORM_SECTIONS) | {"flow"}
    for name, value in data.items():
        if name not in known:
            raise CaseError(file, name, "[section]", "a known section: " + ", ".join(sorted(known)))
        if not isinstance(value, dict):
            raise CaseError(file, name, value, f"[{name}] to be a table of keys")
    sections = {name: Section(validate_section(data.get(name, {}), keys, name, file))
                for name, keys in SECTIONS.items()}
    for name, validator in FREEFORM_SECTIONS.items():
        sections[name] = validator(data.get(name), file)
    box = Box(sections["domain"].lengths, sections["domain"].grid)
    flow_type, flow_params, flow = validate_flow(data.get("flow"), box, file)
    eta, Rm = resolve_diffusivity(sections["magnetic"], flow, file)
    return Case(file, text, tuple(overrides), box, flow_type, flow_params, flow, eta, Rm, sections)


def validate_section(raw: dict, keys: dict, section: str, file: str) -> dict:
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
        elif spec.default is schema.REQUIRED:
            raise CaseError(file, f"{section}.{key}", MISSING, spec.doc)
        else:
            out[key] = spec.default
    return out


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


def validate_flow(raw, box: Box, file: str):
    from kindyn.flows import FLOW_TYPES, make_flow

    if raw is None:
        raise CaseError(file, "flow", MISSING, "a [flow] section with a type")
    params = dict(raw)
    flow_type = params.pop("type", MISSING)
    if flow_type not in FLOW_TYPES:
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
    try:
        flow = make_flow(flow_type, params, box, str(Path(file).parent))
    except ParameterError as exc:
        section = "domain" if exc.key == "grid" else "flow"
        raise CaseError(file, f"{section}.{exc.key}", exc.value, exc.expected) from None
    return flow_type, params, flow


def resolve_diffusivity(magnetic: Section, flow, file: str) -> tuple[float, float]:
    eta, Rm = magnetic.eta, magnetic.Rm
    if (eta is None) == (Rm is None):
        raise CaseError(file, "magnetic.eta" if eta is not None else "magnetic", eta if eta is not None else MISSING,
                        "exactly one of magnetic.eta and magnetic.Rm")
    scale = flow.speed / flow.wavenumber
    if scale <= 0 or not math.isfinite(scale):
        raise CaseError(file, "flow", "U = 0", "a flow with non-zero speed (Rm is undefined)")
    if eta is None:
        return scale / Rm, Rm
    return eta, scale / eta
