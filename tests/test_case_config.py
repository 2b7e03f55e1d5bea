"""Typed configuration: every case section is a frozen dataclass with declared fields.

* :class:`kindyn.case.Case`, :class:`kindyn.case.CaseConfig` and each section are frozen
  dataclasses whose fields are declared (visible to a reader and a type checker); the key table of
  a section is its fields; an unknown attribute raises AttributeError and nothing can be set.
* :func:`kindyn.case.read_config` validates a case without building the box or the flow, and in a
  fresh interpreter it loads none of numba, netCDF4, matplotlib, pyfftw, dask.
* The allowed words of the registries (Runge–Kutta schemes, transform engines, planning efforts,
  precisions, array-kernel sets, flow types) are the words the case accepts and lists.
* The identity of a shipped case is the one recorded before the sections became dataclasses
  (checkpoints and sweep points are found by it; kindyn.case.load.Case.fingerprint).

No runs (fast, < 3 s apart from the subprocess).
"""

from __future__ import annotations

import dataclasses
import os
import subprocess
import sys
import textwrap
import typing
from pathlib import Path

import pytest

from kindyn.array_kernels import KERNEL_SETS
from kindyn.case import Case, CaseConfig, load_case, read_config
from kindyn.case.schema import SectionConfig
from kindyn.case.sections import FREEFORM_SECTIONS, SECTIONS
from kindyn.case.sweep_section import SweepSpec
from kindyn.errors import CaseError
from kindyn.flows import FLOW_TYPES
from kindyn.stepping import TABLEAUX
from kindyn.transforms import ENGINES, PLANNING_EFFORTS, PRECISIONS

ROOT = Path(__file__).resolve().parents[1]
CASE_DIR = ROOT / "cases"
CASE_PACKAGE = ROOT / "kindyn" / "case"

GOOD = """\
[domain]
grid = [8, 8, 8]
[flow]
type = "abc"
[magnetic]
Rm = 5.0
[numerics]
planning = "estimate"
"""


def _is_frozen_dataclass(obj) -> bool:
    return dataclasses.is_dataclass(obj) and type(obj).__dataclass_params__.frozen


def test_case_and_every_section_are_frozen_dataclasses_with_declared_fields(write_case):
    case = load_case(write_case(GOOD))
    assert isinstance(case, Case) and isinstance(case, CaseConfig) and _is_frozen_dataclass(case)
    hints = typing.get_type_hints(CaseConfig)
    names = (*SECTIONS, *FREEFORM_SECTIONS)
    assert {"domain", "magnetic", "run", "numerics", "output", "testfield", "modes", "sweep"} <= set(names)
    for name in names:
        section = getattr(case, name)
        assert _is_frozen_dataclass(section), name
        assert isinstance(section, hints[name]), name  # the field's declared type
        with pytest.raises(AttributeError):
            getattr(section, "no_such_key")
        first = dataclasses.fields(section)[0].name
        with pytest.raises(dataclasses.FrozenInstanceError):
            setattr(section, first, getattr(section, first))
    assert hints["sweep"] is SweepSpec
    for name, cls in SECTIONS.items():
        assert hints[name] is cls and issubclass(cls, SectionConfig)
        # the key table is the dataclass's fields, in order: nothing is declared twice
        assert list(cls.key_table()) == [f.name for f in dataclasses.fields(cls)]
        # [output]'s figure-style keys stay out of the resolved case at their defaults (they came
        # after the fingerprints of checkpoints and sweep points; OutputConfig.as_dict)
        hidden = set(getattr(cls, "STYLE_KEYS", ())) | set(getattr(cls, "LATER_KEYS", ()))
        if name == "cluster":  # where points run, not what they compute: in no identity at all
            assert getattr(case, name).as_dict() == {}
            continue
        assert getattr(case, name).as_dict() == {f.name: getattr(getattr(case, name), f.name)
                                                 for f in dataclasses.fields(cls)
                                                 if f.name not in hidden or getattr(getattr(case, name), f.name)
                                                 != f.default}
    assert case.run.cfl == 1.0 and case.numerics.planning == "estimate" and case.magnetic.Rm == 5.0
    assert case.domain.grid == (8, 8, 8) and case.testfield.modes is None and case.modes.count == 4
    with pytest.raises(AttributeError):
        getattr(case, "no_such_section")
    with pytest.raises(dataclasses.FrozenInstanceError):
        case.eta = 1.0
    # the name -> section view is read-only and built from the fields
    assert case.sections["run"] is case.run and list(case.sections) == list(names)
    with pytest.raises(TypeError):
        case.sections["run"] = case.modes


def test_no_dynamic_attributes_in_the_case_package():
    offenders = [p.name for p in sorted(CASE_PACKAGE.glob("*.py")) if "__getattr__" in p.read_text(encoding="utf-8")]
    assert offenders == []


def test_read_config_validates_without_building(write_case):
    # k = 3 needs 10 points along each axis: a problem of the built flow, not of the file
    path = write_case(GOOD.replace('type = "abc"', 'type = "abc"\nk = 3'))
    config = read_config(path)
    assert type(config) is CaseConfig
    assert config.flow_type == "abc" and config.flow_params == {"k": 3.0}
    assert isinstance(config.flow_params["k"], float)  # typed like the flow's field
    assert not hasattr(config, "flow") and not hasattr(config, "box") and not hasattr(config, "eta")
    with pytest.raises(CaseError, match=r"domain\.grid = \[8, 8, 8\].*at least 10 points along x"):
        load_case(path)
    # the file's own mistakes are found by read_config already
    with pytest.raises(CaseError, match=r"flow\.D = 1\.0.*a parameter of the abc flow"):
        read_config(write_case(GOOD.replace('type = "abc"', 'type = "abc"\nD = 1.0'), "bad.toml"))
    with pytest.raises(CaseError, match=r"magnetic is missing.*exactly one of magnetic\.eta and magnetic\.Rm"):
        read_config(write_case(GOOD.replace("Rm = 5.0", "seed = 2"), "neither.toml"))


HEAVY = ("numba", "netCDF4", "matplotlib", "pyfftw", "dask")


@pytest.fixture(scope="module")
def modules_after_validation():
    """The heavy libraries in ``sys.modules`` after validating every shipped case in a fresh process
    (a sweep's case with the swept key set, as the sweep's points are)."""
    cases = sorted(str(p) for p in CASE_DIR.glob("*.toml"))
    code = textwrap.dedent(f"""
        import sys
        from pathlib import Path
        from kindyn.case import read_config
        for path in {cases!r}:
            sweep = "[sweep]" in Path(path).read_text(encoding="utf-8")
            read_config(path, ["magnetic.Rm=10"] if sweep else [])
        print(" ".join(m for m in {HEAVY!r} if m in sys.modules))
        """)
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1"}
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=300,
                          cwd=ROOT)
    assert done.returncode == 0, done.stderr
    return set(done.stdout.split())


@pytest.mark.parametrize("package", HEAVY)
def test_validating_a_case_loads_no_heavy_library(package, modules_after_validation):
    assert package not in modules_after_validation


def _message(write_case, text, name="case.toml") -> str:
    with pytest.raises(CaseError) as info:
        read_config(write_case(text, name))
    return str(info.value)


@pytest.mark.parametrize("section, key, registry", [
    ("run", "scheme", tuple(TABLEAUX)),
    ("numerics", "fft", tuple(ENGINES)),
    ("numerics", "planning", tuple(PLANNING_EFFORTS)),
    ("numerics", "precision", tuple(PRECISIONS)),
    ("numerics", "array_kernels", tuple(KERNEL_SETS)),
])
def test_allowed_words_are_those_of_the_registry(section, key, registry, write_case):
    base = GOOD.replace('[numerics]\nplanning = "estimate"\n', "")
    message = _message(write_case, base + f'[{section}]\n{key} = "no-such-word"\n')
    assert f"{section}.{key} = \"no-such-word\"" in message
    assert message.endswith("one of " + ", ".join(f'"{w}"' for w in registry)), message
    for i, word in enumerate(registry):
        if key == "array_kernels" and word == "numba":
            continue  # accepted only where numba works (tests/test_array_kernels.py)
        config = read_config(write_case(base + f'[{section}]\n{key} = "{word}"\n', f"ok{i}.toml"))
        assert getattr(getattr(config, section), key) == word


def test_flow_types_are_those_of_the_registry(write_case):
    message = _message(write_case, GOOD.replace('"abc"', '"abcd"'))
    assert message.endswith("one of " + ", ".join(f'"{t}"' for t in FLOW_TYPES)), message


def test_the_identity_of_a_shipped_case_is_unchanged():
    # recorded before the sections became dataclasses: a change here orphans every checkpoint and
    # sweep point made so far (they are found by the fingerprint)
    case = load_case(CASE_DIR / "abc-first-window.toml")
    assert case.fingerprint == "77820483a4143127"
    assert case.resolved["run"]["tolerance"] == 5e-5 and case.resolved["sweep"] == {}
