"""The package layout keeps its rules (DEVELOPERS.md, "Architecture").

Imports are read from the source with :mod:`ast` (module level and inside functions;
imports under ``if TYPE_CHECKING:`` are type hints only and do not count).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from tests.helpers import REPO_ROOT

PACKAGE = REPO_ROOT / "gridflex"


def _module_name(path: Path) -> str:
    parts = path.relative_to(REPO_ROOT).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imports(tree: ast.AST) -> set[str]:
    """The gridflex modules (or packages) one source file imports, hints excluded."""
    found: set[str] = set()

    def visit(node: ast.AST) -> None:
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            for child in node.orelse:
                visit(child)
            return
        if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("gridflex"):
            found.update(f"{node.module}.{alias.name}" for alias in node.names)
            found.add(str(node.module))
        elif isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name.startswith("gridflex"))
        for child in ast.iter_child_nodes(node):
            visit(child)

    visit(tree)
    return found


MODULES = {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}
IMPORTS = {
    name: {m for m in _imports(ast.parse(path.read_text())) if m in MODULES and m != name}
    for name, path in MODULES.items()
}


def _area(module: str) -> str:
    """``gridflex.solvers.spectral`` -> ``solvers``; a top-level module is its own area."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else ""


def test_the_top_level_holds_at_most_sixteen_modules():
    top = [p.name for p in PACKAGE.glob("*.py")]
    assert len(top) <= 16, sorted(top)


SOLVER_MAY_USE = {"solvers", "errors", "constants", "validation", "progress", "memory", "grid"}


@pytest.mark.parametrize("module", [m for m in MODULES if _area(m) == "solvers"])
def test_solvers_use_only_numpy_level_pieces(module):
    outside = {m for m in IMPORTS[module] if _area(m) not in SOLVER_MAY_USE}
    assert not outside, f"{module} imports {sorted(outside)}"


BELOW_IO = {"workflows", "scenario", "cli", "estimation", "glacial", "basin", "sweeps"}


@pytest.mark.parametrize("module", [m for m in MODULES if _area(m) == "io"])
def test_io_knows_no_physics_workflow_or_scenario(module):
    above = {m for m in IMPORTS[module] if _area(m) in BELOW_IO | {"engine", "infill"}}
    assert not above, f"{module} imports {sorted(above)}"


@pytest.mark.parametrize(
    ("area", "allowed"),
    [
        ("cli", {"cli", "__main__"}),
        ("bmi", {"bmi"}),
        ("workflows", {"workflows", "cli", "bmi"}),
        ("scenario", {"scenario", "workflows", "cli", "bmi"}),
    ],
)
def test_upper_floors_are_imported_only_from_above(area, allowed):
    wrong = {
        (module, imported)
        for module, imported_set in IMPORTS.items()
        for imported in imported_set
        if _area(imported) == area
        and _area(module) not in allowed
        and module != "gridflex.__main__"
    }
    assert not wrong, sorted(wrong)


def test_no_import_cycles():
    state: dict[str, int] = {}  # 1 visiting, 2 done

    def visit(module: str, path: tuple[str, ...]) -> None:
        if state.get(module) == 2:
            return
        if state.get(module) == 1:
            cycle = path[path.index(module) :] + (module,)
            # a package importing its own modules in __init__ is not a cycle
            if not all(m.startswith(cycle[0]) for m in cycle):
                raise AssertionError(" -> ".join(cycle))
            return
        state[module] = 1
        for imported in sorted(IMPORTS[module]):
            if not module.startswith(imported + "."):  # a module's own package
                visit(imported, (*path, module))
        state[module] = 2

    for module in MODULES:
        visit(module, ())


RESULTS_MAY_USE = {"errors", "constants", "validation", "memory", "units", "grid", "gis"}


@pytest.mark.parametrize("module", [m for m in MODULES if _area(m) == "results"])
def test_results_work_in_memory(module):
    outside = {m for m in IMPORTS[module] if _area(m) not in RESULTS_MAY_USE | {"results"}}
    assert not outside, f"{module} imports {sorted(outside)}"


TESTS = REPO_ROOT / "tests"
NOT_MIRRORED = {TESTS / "test_docs.py", TESTS / "test_layout.py"}  # about the repository


def _tested_module(test_file: Path) -> Path | None:
    """``tests/<sub>/test_<name>.py`` tests ``gridflex/<sub>/<module>.py`` where ``<name>`` is
    ``<module>`` or ``<module>_<aspect>``; a top-level test file, a top-level module."""
    name = test_file.stem.removeprefix("test_")
    folder = PACKAGE / test_file.parent.relative_to(TESTS)
    modules = [m for m in sorted(folder.glob("*.py")) if m.stem != "__init__"]
    named = [m for m in modules if name == m.stem or name.startswith(m.stem + "_")]
    return named[0] if named else None


def test_every_test_file_names_the_module_it_tests():
    files = [
        path
        for path in sorted(TESTS.rglob("test_*.py"))
        if "benchmarks" not in path.relative_to(TESTS).parts and path not in NOT_MIRRORED
    ]
    assert files
    unnamed = [str(path.relative_to(REPO_ROOT)) for path in files if _tested_module(path) is None]
    assert not unnamed, f"test files naming no gridflex module: {unnamed}"
