"""The shape of the code (design.md, section 2; DEVELOPERS.md, "Layers and what each may import").

1. Imports, parsed with ``ast`` from every module under kindyn/ (imports inside functions count:
   a lazy import is still a dependency; ``from kindyn import x`` counts as an import of
   ``kindyn.x`` when ``x`` is a module, of the package's top ``kindyn/__init__.py`` otherwise;
   ``importlib.import_module("...")`` with a literal name counts too). Every module belongs to one
   part of :data:`LAYERS`; no import points up the layers; the parts with a stricter list
   (:data:`ONLY`, :data:`NEVER`, :data:`CONSTANTS_ONLY`) keep to it; each third-party package lives
   in one place; kindyn's parts import each other without cycles. The checker is tested on
   synthetic sources, so that a rule that reports nothing is known to be able to report something.
2. No side effects at import (design.md, section 3, habit 9): importing every module leaves the
   matplotlib backend alone; importing the package and its command line loads none of the heavy
   optional libraries.
3. The flow registry: every registered type builds with its defaults on a suitable box (or, when
   it needs input such as a file, fails with a ParameterError that names the missing key) and
   offers the flow protocol of kindyn/flows/base.py.
"""

from __future__ import annotations

import ast
import fnmatch
import math
import os
import re
import subprocess
import sys
import textwrap
from dataclasses import dataclass
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
DEVELOPERS = PACKAGE.parent / "DEVELOPERS.md"

# ------------------------------------------------------------------------------ the layers
# (level, part, what it is / what it may import besides the parts at or below its level).
# A module belongs to the part with the longest matching name; ``kindyn`` is the package's top
# (``kindyn/__init__.py``) only. Parts that do not exist yet (layout, assemble, api) are listed so
# that they land in their place. The same table is in DEVELOPERS.md (checked below).
LAYERS = (
    (1, "kindyn.errors", "error types; nothing of kindyn"),
    (1, "kindyn._version", "the version string; nothing of kindyn"),
    (1, "kindyn.limits", "the range every number of a case lies in; nothing of kindyn"),
    (2, "kindyn.box", "numpy only"),
    (2, "kindyn.calculus", "spectral calculus on arrays of wavenumbers; numpy only"),
    (3, "kindyn.stepping", "numpy only; of kindyn only stepping and errors (knows nothing about magnetism)"),
    (3, "kindyn.array_kernels", "numpy; numba only in array_kernels/numba_kernels.py"),
    (4, "kindyn.flows", "numpy, scipy; of kindyn only errors, limits, box and calculus; netCDF4 only in flows/velocity_file.py, lazily"),
    (5, "kindyn.transforms", "pyfftw only in transforms/fftw.py; mpi4py, mpi4py_fft only in transforms/distributed*.py"),
    (6, "kindyn.layout", "of kindyn only box, transforms, stepping, array_kernels, errors"),
    (7, "kindyn.induction", "the induction operator"),
    (7, "kindyn.initial_fields", "initial fields"),
    (7, "kindyn.timestep", "time step and sampling"),
    (7, "kindyn.diagnostics", "what is measured; never run, eigen, testfield, sweep, output, commands, case"),
    (8, "kindyn.case", "of kindyn only errors, limits, box, flows, and registry constants of stepping, transforms, array_kernels"),
    (9, "kindyn.output", "plain data in; never run, eigen, testfield, sweep, assemble, induction, layout, stepping"),
    (10, "kindyn.assemble", "builds engine, layout, operator, stepper from configuration slices"),
    (11, "kindyn.run", "driver: one growth run; not eigen or testfield"),
    (11, "kindyn.eigen", "driver: eigen-solves; not run or testfield"),
    (11, "kindyn.testfield", "driver: test-field method; not run or eigen"),
    (12, "kindyn.sweep", "many points of the drivers (each point writes its own file); dask, distributed only here"),
    (13, "kindyn.commands", "one module per command"),
    (13, "kindyn.cli", "the command line"),
    (13, "kindyn.api", "the library entry points (when it exists)"),
    (13, "kindyn.__main__", "python -m kindyn"),
    (13, "kindyn", "the package's top, kindyn/__init__.py"),
)
LEVEL = {part: level for level, part, _ in LAYERS}
DRIVERS = ("kindyn.run", "kindyn.eigen", "kindyn.testfield")

# part -> the only other parts of kindyn it may import (stricter than its level)
ONLY = {
    "kindyn.stepping": {"kindyn.errors"},
    "kindyn.flows": {"kindyn.errors", "kindyn.limits", "kindyn.box", "kindyn.calculus"},
    "kindyn.layout": {"kindyn.errors", "kindyn.box", "kindyn.stepping", "kindyn.array_kernels", "kindyn.transforms"},
    "kindyn.case": {"kindyn.errors", "kindyn.limits", "kindyn.box", "kindyn.flows",
                    "kindyn.stepping", "kindyn.transforms", "kindyn.array_kernels"},
}
# part -> parts it must never import (stated even where the level already forbids it)
NEVER = {
    "kindyn.flows": {"kindyn.transforms", "kindyn.stepping", "kindyn.layout", "kindyn.array_kernels",
                     "kindyn.induction"},
    "kindyn.diagnostics": {"kindyn.run", "kindyn.eigen", "kindyn.testfield", "kindyn.sweep", "kindyn.output",
                           "kindyn.commands", "kindyn.case"},
    "kindyn.case": {"kindyn.eigen", "kindyn.testfield", "kindyn.sweep", "kindyn.run", "kindyn.assemble",
                    "kindyn.output", "kindyn.commands", "kindyn.cli", "kindyn.api"},
    "kindyn.output": {"kindyn.run", "kindyn.eigen", "kindyn.testfield", "kindyn.sweep", "kindyn.assemble",
                      "kindyn.induction", "kindyn.layout", "kindyn.stepping"},
    **{driver: set(DRIVERS) - {driver} for driver in DRIVERS},  # the drivers do not use each other
}
# (importing module, imported part) -> reason: the allowed exceptions to NEVER. None today: the
# direct-run comparison of the test-field closure check is made by commands/testfield.py (top),
# and what eigen/propagator.py and eigen/solve.py take from kindyn.run today (build_solver,
# transform_settings) is what kindyn.assemble is for.
EXCEPTIONS: dict[tuple[str, str], str] = {}
# part -> parts from which it may take registry constants only (UPPER_CASE names, by name)
CONSTANTS_ONLY = {"kindyn.case": {"kindyn.stepping", "kindyn.transforms", "kindyn.array_kernels"}}
# (importing module, imported part, name) -> reason: functions a constants-only part may still take
CONSTANT_EXCEPTIONS = {
    ("kindyn.case.schema", "kindyn.array_kernels", "numba_unavailable_reason"):
        'numerics.array_kernels = "numba" must fail at validation, before any computation, when numba '
        "cannot be loaded; the function imports numba only when called, and only for that value",
}

# third-party package -> the files (fnmatch patterns) that may import it
THIRD_PARTY = {
    "pyfftw": ("kindyn/transforms/fftw.py",),
    "mpi4py": ("kindyn/transforms/distributed*.py",),
    "mpi4py_fft": ("kindyn/transforms/distributed*.py",),
    "numba": ("kindyn/array_kernels/numba_kernels.py",),
    # output's files, and the velocity-file reader of user flows (design.md, section 2)
    "netCDF4": ("kindyn/output/netcdf*.py", "kindyn/output/*_file.py", "kindyn/flows/velocity_file.py"),
    "matplotlib": ("kindyn/output/figures*.py",),
    "dask": ("kindyn/sweep/*.py",),
    "distributed": ("kindyn/sweep/*.py",),
}
# (package, file) pairs that must import the package inside a function only
LAZY_ONLY = {("netCDF4", "kindyn/flows/velocity_file.py")}
# part -> the only third-party packages it may import (standard library always allowed)
PART_THIRD_PARTY = {
    "kindyn.box": {"numpy"},
    "kindyn.stepping": {"numpy"},
    "kindyn.array_kernels": {"numpy", "numba"},
    "kindyn.flows": {"numpy", "scipy", "netCDF4"},
    "kindyn.transforms": {"numpy", "scipy", "pyfftw", "mpi4py", "mpi4py_fft"},
}


# ------------------------------------------------------------------------------ the parser
@dataclass(frozen=True)
class Import:
    file: str  # "kindyn/case/sections.py"
    line: int
    target: str  # the module imported ("kindyn.eigen.settings", "numpy", "kindyn" for the top)
    names: tuple  # the names taken from it by ``from target import ...``; () for ``import target``
    lazy: bool  # inside a function (runs when called, not at import)
    text: str  # the source line, for messages

    def __str__(self):
        return f"{self.file}:{self.line}: {self.text}"


def module_of(file: str) -> str:
    parts = list(Path(file).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def part_of(module: str) -> str | None:
    """The part of :data:`LAYERS` holding ``module`` (None: not in the table)."""
    if module == "kindyn":
        return "kindyn"
    matches = [part for part in LEVEL if part != "kindyn" and (module == part or module.startswith(part + "."))]
    return max(matches, key=len) if matches else None


def is_kindyn(module: str) -> bool:
    return module == "kindyn" or module.startswith("kindyn.")


def parse_imports(file: str, source: str, modules: set[str]) -> list[Import]:
    """Every import in ``source`` (the text of ``file``, a path like ``kindyn/a/b.py``).

    ``modules``: the names of kindyn's modules, to tell ``from kindyn import box`` (a module)
    from ``from kindyn import __version__`` (a name of the package's top).
    """
    tree = ast.parse(source, filename=file)
    lines = source.splitlines()
    package = module_of(file).split(".")
    if not file.endswith("__init__.py"):
        package = package[:-1]
    found: list[Import] = []

    def add(node, target, names, lazy):
        text = lines[node.lineno - 1].strip() if node.lineno <= len(lines) else ""
        found.append(Import(file, node.lineno, target, tuple(names), lazy, text))

    def visit(node, lazy):
        if isinstance(node, ast.Import):
            for alias in node.names:
                add(node, alias.name, (), lazy)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - (node.level - 1)]
                module = ".".join(base + ([node.module] if node.module else []))
            else:
                module = node.module
            plain = []
            for alias in node.names:
                candidate = f"{module}.{alias.name}"
                if is_kindyn(candidate) and (candidate in modules or candidate in LEVEL):
                    add(node, candidate, (), lazy)  # a submodule
                else:
                    plain.append(alias.name)
            if plain or not node.names:
                add(node, module, plain, lazy)
        elif isinstance(node, ast.Call) and _is_import_module(node.func) and node.args:
            name = _literal_prefix(node.args[0])
            if name:
                add(node, name, (), lazy)
        inner = lazy or isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.Lambda))
        for child in ast.iter_child_nodes(node):
            visit(child, inner)

    visit(tree, False)
    return found


def _is_import_module(func) -> bool:
    return (isinstance(func, ast.Attribute) and func.attr == "import_module") or (
        isinstance(func, ast.Name) and func.id in ("import_module", "__import__"))


def _literal_prefix(arg) -> str:
    """The module named by a literal (``"a.b"``) or by the literal start of an f-string
    (``f"kindyn.commands.{name}"`` -> ``kindyn.commands``)."""
    if isinstance(arg, ast.Constant) and isinstance(arg.value, str):
        return arg.value
    if isinstance(arg, ast.JoinedStr) and arg.values and isinstance(arg.values[0], ast.Constant):
        return str(arg.values[0].value).rstrip(".")
    return ""


def read_tree(root: Path = PACKAGE) -> dict[str, str]:
    """``{"kindyn/x/y.py": source}`` for every module of the package."""
    return {path.relative_to(root.parent).as_posix(): path.read_text(encoding="utf-8")
            for path in sorted(root.rglob("*.py"))}


def parse_tree(sources: dict[str, str]) -> dict[str, list[Import]]:
    modules = {module_of(file) for file in sources}
    return {file: parse_imports(file, text, modules) for file, text in sources.items()}


# ------------------------------------------------------------------------------ the checker
def _top_package(module: str) -> str:
    return module.split(".")[0]


def _third_party(module: str) -> bool:
    top = _top_package(module)
    return not is_kindyn(module) and top != "__future__" and top not in sys.stdlib_module_names


def unmapped(imports: dict[str, list[Import]]) -> list[str]:
    return sorted(file for file in imports if part_of(module_of(file)) is None)


def layering_violations(imports: dict[str, list[Import]], source_part: str | None = None) -> list[str]:
    """Imports that point up the layers (or into no part), as ``file:line: text (a -> b)``."""
    found = []
    for file, records in imports.items():
        src = part_of(module_of(file))
        if src is None or (source_part is not None and src != source_part):
            continue
        for rec in records:
            if not is_kindyn(rec.target):
                continue
            dst = part_of(rec.target)
            if dst == src:
                continue
            if dst is None:
                found.append(f"{rec} ({src} -> {rec.target}: not a part of the layer table)")
            elif LEVEL[dst] > LEVEL[src]:
                found.append(f"{rec} ({src}, level {LEVEL[src]} -> {dst}, level {LEVEL[dst]})")
    return sorted(found)


def rule_violations(imports: dict[str, list[Import]], source_part: str | None = None) -> list[str]:
    """Imports against :data:`ONLY`, :data:`NEVER` (less :data:`EXCEPTIONS`) and :data:`CONSTANTS_ONLY`."""
    found = []
    for file, records in imports.items():
        module = module_of(file)
        src = part_of(module)
        if src is None or (source_part is not None and src != source_part):
            continue
        for rec in records:
            if not is_kindyn(rec.target):
                continue
            dst = part_of(rec.target)
            if dst == src:
                continue
            if src in ONLY and dst not in ONLY[src]:
                found.append(f"{rec} ({src} may import only {', '.join(sorted(ONLY[src]))}; not {dst})")
            if dst in NEVER.get(src, ()) and (module, dst) not in EXCEPTIONS:
                found.append(f"{rec} ({src} never imports {dst})")
            if dst in CONSTANTS_ONLY.get(src, ()):
                others = [n for n in rec.names if not re.fullmatch(r"[A-Z][A-Z0-9_]*", n)
                          and (module, dst, n) not in CONSTANT_EXCEPTIONS]
                if not rec.names or others:
                    found.append(f"{rec} ({src} takes only registry constants from {dst}; "
                                 f"not {', '.join(others) or 'the module'})")
    return sorted(found)


def third_party_violations(imports: dict[str, list[Import]]) -> list[str]:
    """Third-party packages outside their files, eager where only lazy is allowed, or outside
    their part's list."""
    found = []
    for file, records in imports.items():
        src = part_of(module_of(file))
        for rec in records:
            if not _third_party(rec.target):
                continue
            package = _top_package(rec.target)
            if package in THIRD_PARTY and not any(fnmatch.fnmatch(file, p) for p in THIRD_PARTY[package]):
                found.append(f"{rec} ({package} only in {', '.join(THIRD_PARTY[package])})")
            if (package, file) in LAZY_ONLY and not rec.lazy:
                found.append(f"{rec} ({package} only inside a function in {file})")
            if src in PART_THIRD_PARTY and package not in PART_THIRD_PARTY[src]:
                found.append(f"{rec} ({src} may use only {', '.join(sorted(PART_THIRD_PARTY[src]))})")
    return sorted(found)


def part_graph(imports: dict[str, list[Import]]) -> dict[str, dict[str, list[Import]]]:
    """``{part: {imported part: [the imports making the edge]}}`` among kindyn's parts."""
    graph: dict[str, dict[str, list[Import]]] = {}
    for file, records in imports.items():
        src = part_of(module_of(file))
        if src is None:
            continue
        graph.setdefault(src, {})
        for rec in records:
            dst = part_of(rec.target) if is_kindyn(rec.target) else None
            if dst is not None and dst != src:
                graph[src].setdefault(dst, []).append(rec)
    return graph


def part_cycles(imports: dict[str, list[Import]]) -> list[list[str]]:
    """One cycle ``[a, b, ..., a]`` through each strongly connected group of parts (Tarjan)."""
    graph = part_graph(imports)
    index, low, on_stack, stack, groups = {}, {}, set(), [], []

    def connect(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph.get(v, {})):
            if w not in index:
                connect(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            group = set()
            while True:
                w = stack.pop()
                on_stack.discard(w)
                group.add(w)
                if w == v:
                    break
            if len(group) > 1:
                groups.append(group)

    for v in sorted(graph):
        if v not in index:
            connect(v)
    cycles = []
    for group in groups:  # the shortest cycle through the group's first part, by breadth-first search
        start = min(group)
        paths, seen = [[start]], {start}
        while paths:
            path = paths.pop(0)
            following = sorted(w for w in graph.get(path[-1], {}) if w in group)
            if start in following:
                cycles.append(path + [start])
                break
            for w in following:
                if w not in seen:
                    seen.add(w)
                    paths.append(path + [w])
    return sorted(cycles)


def describe_cycle(imports, cycle: list[str]) -> str:
    graph = part_graph(imports)
    steps = [f"  {a} -> {b}: {graph[a][b][0]}" for a, b in zip(cycle, cycle[1:])]
    return " -> ".join(cycle) + "\n" + "\n".join(steps)


SOURCES = read_tree()
IMPORTS = parse_tree(SOURCES)
PRESENT_PARTS = sorted({part_of(module_of(f)) for f in IMPORTS} - {None}, key=lambda p: (LEVEL[p], p))


# ------------------------------------------------------------------------------ the checks
def test_the_parser_sees_the_package():
    assert "kindyn/run.py" in IMPORTS and "kindyn/transforms/fftw.py" in IMPORTS
    assert "pyfftw" in {rec.target for rec in IMPORTS["kindyn/transforms/fftw.py"]}
    # imports inside functions and classes are seen; only those inside functions are lazy
    records = parse_tree({"kindyn/run.py": "class A:\n    import numpy\n    def f(self):\n        import scipy\n"})
    assert [(r.target, r.lazy) for r in records["kindyn/run.py"]] == [("numpy", False), ("scipy", True)]


def test_every_module_belongs_to_a_part():
    assert unmapped(IMPORTS) == [], "modules missing from LAYERS (add a line, and to DEVELOPERS.md)"


@pytest.mark.parametrize("part", PRESENT_PARTS)
def test_no_import_points_up_the_layers(part):
    assert layering_violations(IMPORTS, part) == []


@pytest.mark.parametrize("part", sorted(set(ONLY) | set(NEVER) | set(CONSTANTS_ONLY)))
def test_parts_keep_to_their_stricter_lists(part):
    assert rule_violations(IMPORTS, part) == []


def test_each_third_party_package_lives_in_its_place():
    assert third_party_violations(IMPORTS) == []


def test_no_import_cycle_between_parts():
    cycles = part_cycles(IMPORTS)
    assert cycles == [], "\n".join(describe_cycle(IMPORTS, c) for c in cycles)


def test_the_exceptions_are_used_and_explained():
    for (module, part), reason in EXCEPTIONS.items():
        assert reason.strip(), (module, part)
        file = next(f for f in IMPORTS if module_of(f) == module)
        assert any(part_of(r.target) == part for r in IMPORTS[file] if is_kindyn(r.target)), (module, part)


def test_developers_guide_lists_the_same_layers():
    text = DEVELOPERS.read_text(encoding="utf-8")
    assert "## Layers and what each may import" in text
    section = text.split("## Layers and what each may import", 1)[1].split("\n## ", 1)[0]
    listed = [(int(level), part) for level, part in re.findall(r"^\|\s*(\d+)\s*\|\s*`([\w.]+)`", section, re.M)]
    assert listed == [(level, part) for level, part, _ in LAYERS]


# ------------------------------------------------------------------------------ the checker catches
def _check(sources: dict[str, str]):
    imports = parse_tree({**SOURCES, **sources})
    only_new = {f: imports[f] for f in sources}
    return imports, only_new


@pytest.mark.parametrize("line", [
    "from kindyn.run import run_growth",
    "from kindyn import run",
    "import kindyn.run",
    "from ..run import run_growth",
    "def later():\n    from kindyn.run import run_growth\n",  # lazy imports count
    "import importlib\nimportlib.import_module('kindyn.run')",
])
def test_the_checker_reports_an_upward_import(line):
    _, new = _check({"kindyn/case/bad.py": line + "\n"})
    found = layering_violations(new)
    assert len(found) == 1 and "kindyn.case, level 8 -> kindyn.run, level 11" in found[0], found
    assert any("never imports kindyn.run" in v for v in rule_violations(new)), rule_violations(new)


def test_the_checker_reports_the_stricter_rules_and_third_party_places():
    _, new = _check({
        "kindyn/stepping/bad.py": "from kindyn.box import Box\n",
        "kindyn/flows/bad.py": "import netCDF4\nfrom kindyn.stepping import TABLEAUX\n",
        "kindyn/case/bad.py": "from kindyn.array_kernels import KERNEL_SETS, make_kernels\n",
        "kindyn/eigen/bad.py": "from kindyn.run import build_solver\n",
        "kindyn/output/bad.py": "import matplotlib.pyplot as plt\nfrom kindyn.induction import InductionOperator\n",
        "kindyn/box_helpers.py": "import os\n",
    })
    rules = "\n".join(rule_violations(new))
    assert "kindyn.stepping may import only kindyn.errors; not kindyn.box" in rules
    assert "kindyn.flows never imports kindyn.stepping" in rules
    assert "registry constants from kindyn.array_kernels; not make_kernels" in rules
    assert "kindyn.eigen never imports kindyn.run" in rules
    assert "kindyn.output never imports kindyn.induction" in rules
    third = "\n".join(third_party_violations(new))
    assert "kindyn/flows/bad.py:1: import netCDF4 (netCDF4 only in" in third
    assert "kindyn/output/bad.py:1: import matplotlib.pyplot as plt (matplotlib only in" in third
    assert unmapped(new) == ["kindyn/box_helpers.py"]
    # an eager netCDF4 import in the velocity-file reader, but not a lazy one
    eager = parse_tree({"kindyn/flows/velocity_file.py": "import netCDF4\n"})
    lazy = parse_tree({"kindyn/flows/velocity_file.py": "def read():\n    import netCDF4\n"})
    assert any("only inside a function" in v for v in third_party_violations(eager))
    assert third_party_violations(lazy) == []


def test_the_checker_finds_a_cycle_between_parts():
    sources = {"kindyn/box.py": "from kindyn.flows import base\n",
               "kindyn/flows/base.py": "from kindyn.box import Box\n",
               "kindyn/errors.py": ""}
    imports = parse_tree(sources)
    assert part_cycles(imports) == [["kindyn.box", "kindyn.flows", "kindyn.box"]]
    assert "kindyn/flows/base.py:1: from kindyn.box import Box" in describe_cycle(imports, part_cycles(imports)[0])
    assert part_cycles(parse_tree({"kindyn/flows/base.py": "from kindyn.box import Box\n"})) == []


def test_from_kindyn_import_a_name_is_an_import_of_the_top():
    records = parse_tree({"kindyn/output/bad.py": "from kindyn import __version__, box\n",
                          "kindyn/box.py": ""})["kindyn/output/bad.py"]
    assert sorted((r.target, r.names) for r in records) == [("kindyn", ("__version__",)), ("kindyn.box", ())]


# ------------------------------------------------------------------------------ no side effects at import
OPTIONAL = ("numba", "dask", "distributed", "mpi4py", "mpi4py_fft")  # extras that may be missing
HEAVY = ("matplotlib", "numba", "netCDF4", "pyfftw")


def _python(code: str, **env) -> subprocess.CompletedProcess:
    environment = {**os.environ, **env}
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True, text=True,
                          env=environment, timeout=600, cwd=PACKAGE.parent)


def test_importing_every_module_leaves_the_matplotlib_backend_alone():
    result = _python(f"""
        import importlib, pkgutil, sys
        import matplotlib
        before = matplotlib.get_backend()
        import kindyn
        seen = []
        for info in pkgutil.walk_packages(kindyn.__path__, "kindyn."):
            if info.name == "kindyn.__main__":  # runs the command line when imported, by design
                continue
            try:
                importlib.import_module(info.name)
            except ModuleNotFoundError as exc:
                if exc.name not in {OPTIONAL!r}:
                    raise
            seen.append(info.name)
        print(before, matplotlib.get_backend(), " ".join(seen))
        """, MPLBACKEND="svg")
    assert result.returncode == 0, result.stderr
    before, after, *seen = result.stdout.split()
    assert before == "svg" and after == "svg"
    expected = {module_of(f) for f in SOURCES} - {"kindyn", "kindyn.__main__"}
    assert set(seen) == expected, "pkgutil must see every module (a folder without __init__.py is skipped)"


@pytest.mark.parametrize("modules", [("kindyn", "kindyn.cli"), ("kindyn.case", "kindyn.flows")])
def test_importing_the_package_loads_no_heavy_library(modules):
    result = _python(f"""
        import importlib, sys
        for name in {modules!r}:
            importlib.import_module(name)
        print(" ".join(sorted(m for m in {HEAVY!r} if m in sys.modules)))
        """)
    assert result.returncode == 0, result.stderr
    assert result.stdout.split() == []


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
