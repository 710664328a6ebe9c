"""The package's modules import one another without loops (DEVELOPERS.md, "Conventions").

Every import statement of every module under ``planner/`` counts, those inside functions too,
read with the standard library's ``ast``; an import of a package's ``__init__`` is not an
edge, as a package face only hands names on.
"""
from __future__ import annotations

import ast
import graphlib
from pathlib import Path

import planner

ROOT = Path(planner.__file__).parent


def module_files() -> dict[str, Path]:
    """Dotted module name → file, for every module of the package."""
    files = {}
    for path in ROOT.rglob("*.py"):
        parts = path.relative_to(ROOT.parent).with_suffix("").parts
        if parts[-1] == "__init__":
            parts = parts[:-1]
        files[".".join(parts)] = path
    return files


def imported(name: str, path: Path, files: dict[str, Path]) -> set[str]:
    """The package's modules that module ``name`` imports (faces left out)."""
    package = name.split(".") if path.name == "__init__.py" else name.split(".")[:-1]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                parts = package[:len(package) - (node.level - 1)]
                base = ".".join(parts + ([base] if base else []))
            targets = [base] + [f"{base}.{a.name}" for a in node.names]
        else:
            continue
        for target in targets:
            while target and target not in files:
                target = target.rpartition(".")[0]
            if target and target != name and files[target].name != "__init__.py":
                found.add(target)
    return found


def import_graph() -> dict[str, set[str]]:
    files = module_files()
    return {name: imported(name, path, files) for name, path in files.items()}


def test_the_graph_sees_the_imports_it_should():
    graph = import_graph()
    assert "planner.optimize.problem" in graph["planner.optimize.schedule"]
    assert "planner.executor" in graph["planner.options"]
    # a face is not an edge: cli imports planner.pipeline lazily, never through planner/__init__
    assert "planner.pipeline" in graph["planner.cli"]
    assert "planner" not in graph["planner.cli"]


def test_no_import_loops_inside_the_package():
    sorter = graphlib.TopologicalSorter(import_graph())
    try:
        sorter.prepare()
    except graphlib.CycleError as exc:
        raise AssertionError(f"import loop: {' -> '.join(exc.args[1])}") from None


def test_a_loop_would_be_found():
    sorter = graphlib.TopologicalSorter({"a": {"b"}, "b": {"c"}, "c": {"a"}})
    try:
        sorter.prepare()
    except graphlib.CycleError:
        return
    raise AssertionError("graphlib did not report the loop a -> b -> c -> a")


def test_module_names_are_unique_in_the_package():
    """One concept, one place: no two modules share a file name (DEVELOPERS.md,
    "Conventions")."""
    seen: dict[str, list[str]] = {}
    for name in module_files():
        seen.setdefault(name.rpartition(".")[2], []).append(name)
    twice = {short: names for short, names in seen.items() if len(names) > 1}
    assert not twice, twice
