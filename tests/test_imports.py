"""The shape of the code (design.md, section 2) and the flow registry.

1. Imports, parsed with ``ast`` from every module under kindyn/ (also imports inside functions):
   each third-party package lives in one place, and the dependency direction
   case file -> flow -> solver -> diagnostics -> output is never reversed where it matters.
2. The flow registry: every registered type builds with its defaults on a suitable box (or, when
   it needs input such as a file, fails with a ParameterError that names the missing key) and
   offers the flow protocol of kindyn/flows/base.py.
"""

from __future__ import annotations

import ast
import math
from pathlib import Path

import numpy as np
import pytest

import kindyn
from kindyn.box import Box
from kindyn.calculus import divergence_hat
from kindyn.errors import ParameterError
from kindyn.flows import FLOW_TYPES, make_flow, sample_velocity
from kindyn.transforms import TransformSettings, make_engine, spectral_from_physical

PACKAGE = Path(kindyn.__file__).parent


def module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def imported_modules(path: Path) -> set[str]:
    """Every module named by an import statement in ``path`` (relative imports resolved;
    ``from a import b`` yields both ``a`` and ``a.b``, since ``b`` may be a module)."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    package = module_name(path).split(".")
    if path.name != "__init__.py":
        package = package[:-1]
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - (node.level - 1)]
                module = ".".join(base + ([node.module] if node.module else []))
            else:
                module = node.module
            found.add(module)
            found.update(f"{module}.{alias.name}" for alias in node.names)
    return found


MODULES = {path.relative_to(PACKAGE.parent).as_posix(): imported_modules(path)
           for path in sorted(PACKAGE.rglob("*.py"))}


def importers_of(prefix: str) -> set[str]:
    return {file for file, names in MODULES.items()
            if any(n == prefix or n.startswith(prefix + ".") for n in names)}


def test_the_parser_sees_the_package():
    assert "kindyn/run.py" in MODULES and "kindyn/transforms/fftw.py" in MODULES
    assert "pyfftw" in MODULES["kindyn/transforms/fftw.py"]


# third-party package -> predicate on the file that may import it (design.md, section 2)
THIRD_PARTY = {
    # the transform engines (3-D real-to-complex in fftw.py, 2-D complex for the planar reduction)
    "pyfftw": lambda f: f.startswith("kindyn/transforms/"),
    # output, and the velocity-file reader (design.md: "netCDF4 in output and the velocity-file
    # reader"); flows/user.py is where the core issue's brief expected that reader
    "netCDF4": lambda f: f.startswith("kindyn/output/") or f in ("kindyn/flows/user.py",
                                                                   "kindyn/flows/velocity_file.py"),
    "matplotlib": lambda f: f.startswith("kindyn/output/figures") and f.endswith(".py"),
    "dask": lambda f: f.startswith("kindyn/sweep/") or f == "kindyn/sweep.py",
    "distributed": lambda f: f.startswith("kindyn/sweep/") or f == "kindyn/sweep.py",
    # the optional compiled array kernels
    "numba": lambda f: f == "kindyn/array_kernels/numba_kernels.py",
    "mpi4py": lambda f: f.startswith("kindyn/transforms/"),
    "mpi4py_fft": lambda f: f.startswith("kindyn/transforms/"),
}


@pytest.mark.parametrize("package", sorted(THIRD_PARTY))
def test_each_third_party_package_lives_in_one_place(package):
    allowed = THIRD_PARTY[package]
    offenders = sorted(f for f in importers_of(package) if not allowed(f))
    assert offenders == [], f"{package} imported outside its module: {offenders}"


def _under(folder: str):
    return [f for f in MODULES if f.startswith(f"kindyn/{folder}/")]


def _kindyn_imports(file: str) -> set[str]:
    return {n for n in MODULES[file] if n == "kindyn" or n.startswith("kindyn.")}


def test_flows_never_import_transforms_or_stepping():
    # flows are formulas (or data) in physical space
    bad = {f: sorted(n for n in _kindyn_imports(f) if n.startswith(("kindyn.transforms", "kindyn.stepping")))
           for f in _under("flows")}
    assert {f: names for f, names in bad.items() if names} == {}


def test_stepping_never_imports_physics():
    # the stepper knows nothing about magnetism: only itself and the error types
    bad = {f: sorted(n for n in _kindyn_imports(f) if not n.startswith(("kindyn.stepping", "kindyn.errors")))
           for f in _under("stepping")}
    assert {f: names for f, names in bad.items() if names} == {}


def test_output_never_imports_the_solver():
    # output takes plain data: no kindyn.run, kindyn.induction or kindyn.stepping
    forbidden = ("kindyn.run", "kindyn.induction", "kindyn.stepping")
    bad = {f: sorted(n for n in _kindyn_imports(f) if any(n == m or n.startswith(m + ".") for m in forbidden))
           for f in _under("output")}
    assert {f: names for f, names in bad.items() if names} == {}


# ------------------------------------------------------------------------------ flow registry
NEEDS_INPUT = {  # types that cannot be built without the user's input, and the key that says so
    "formula": "ux",
    "callable": "function",
    "velocity-file": "file",
}
PROTOCOL = ("speed", "wavenumber", "steady", "z_independent", "velocity", "check_box")


def test_registry_entries_are_classes_with_unique_names():
    assert len(set(FLOW_TYPES.values())) == len(FLOW_TYPES)
    for name, cls in FLOW_TYPES.items():
        assert isinstance(cls, type), name
        assert name == name.lower() and " " not in name


@pytest.mark.parametrize("name", sorted(NEEDS_INPUT))
def test_flow_types_needing_input_say_what_is_missing(name, tmp_path):
    with pytest.raises(ParameterError) as info:
        make_flow(name, {}, Box(grid=(16, 16, 16)), str(tmp_path))
    assert info.value.key == NEEDS_INPUT[name]


@pytest.mark.parametrize("name", sorted(set(FLOW_TYPES) - set(NEEDS_INPUT)))
def test_every_flow_builds_with_defaults_and_follows_the_protocol(name, tmp_path):
    box = Box((2 * math.pi,) * 3, (16, 16, 16))
    flow = make_flow(name, {}, box, str(tmp_path))
    for attribute in PROTOCOL:
        assert hasattr(flow, attribute), (name, attribute)
    assert flow.speed > 0 and math.isfinite(flow.speed)
    assert flow.wavenumber > 0 and math.isfinite(flow.wavenumber)
    assert isinstance(flow.steady, (bool, np.bool_)) and isinstance(flow.z_independent, (bool, np.bool_))
    period = getattr(flow, "period", None)
    assert period is None or period > 0
    flow.check_box(box)  # the box it was built for is acceptable
    u0 = sample_velocity(flow, box, 0.0)
    assert u0.shape == (3, *box.shape) and np.all(np.isfinite(u0))
    assert np.sqrt(np.mean(np.sum(u0**2, axis=0))) > 0
    if flow.steady:
        np.testing.assert_array_equal(sample_velocity(flow, box, 1.3), u0)
    if flow.z_independent:
        np.testing.assert_allclose(u0, u0[:, :, :, :1] * np.ones((1, 1, 1, box.grid[2])), rtol=0, atol=1e-14)
    else:
        assert np.max(np.abs(u0 - u0[:, :, :, :1])) > 1e-6
    # incompressible, as every registered flow is documented to be: |div u| at round-off
    engine = make_engine(box, TransformSettings(planning="estimate"))
    u_hat = spectral_from_physical(engine, u0)
    k_max = math.sqrt(float(box.k_squared.max()))
    assert np.max(np.abs(divergence_hat(u_hat, box))) <= 1e-12 * k_max * np.max(np.abs(u_hat))
