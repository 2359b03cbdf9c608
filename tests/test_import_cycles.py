"""No import cycles at run time inside abm/: every import counts (at module level or inside a function), except
the type-only ones under ``if TYPE_CHECKING:``, and importing a submodule counts as importing its packages too.

Strongly connected components of the import graph are found by Tarjan's algorithm (Tarjan 1972, "Depth-first
search and linear graph algorithms", SIAM J. Comput. 1(2)); a component of more than one module is a cycle.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "abm"


def _module_names(root: Path) -> dict[str, Path]:
    names = {}
    for path in root.rglob("*.py"):
        parts = path.relative_to(root.parent).with_suffix("").parts
        names[".".join(parts[:-1] if parts[-1] == "__init__" else parts)] = path
    return names


def _type_only(node: ast.AST) -> bool:
    if not isinstance(node, ast.If):
        return False
    test = node.test
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING")


def _imported(tree: ast.AST, package: str, modules: dict[str, Path]) -> set[str]:
    """Every module name an import in ``tree`` names, type-only imports left out."""
    names: set[str] = set()
    pending = [tree]
    while pending:
        node = pending.pop()
        for child in ast.iter_child_nodes(node):
            if _type_only(child):
                pending.extend(child.orelse)  # `else:` of a TYPE_CHECKING test runs
                continue
            if isinstance(child, ast.Import):
                names.update(alias.name for alias in child.names)
            elif isinstance(child, ast.ImportFrom):
                if child.level:  # relative: from the package, `level - 1` packages up
                    parts = package.split(".")
                    stem = ".".join(parts[: len(parts) - child.level + 1] + ([child.module] if child.module else []))
                else:
                    stem = child.module or ""
                names.add(stem)
                names.update(f"{stem}.{alias.name}" for alias in child.names if f"{stem}.{alias.name}" in modules)
            pending.append(child)
    return names


def import_graph(root: Path) -> dict[str, set[str]]:
    """Module -> the modules of ``root``'s package it imports at run time (with their enclosing packages)."""
    modules = _module_names(root)
    graph = {}
    for name, path in modules.items():
        package = name if path.name == "__init__.py" else name.rpartition(".")[0]
        edges = set()
        for target in _imported(ast.parse(path.read_text(encoding="utf-8")), package, modules):
            parts = target.split(".")
            for i in range(1, len(parts) + 1):
                enclosing = ".".join(parts[:i])
                # a module's own packages are imported before it, so importing them again is no cycle
                if enclosing in modules and enclosing != name and not name.startswith(enclosing + "."):
                    edges.add(enclosing)
        graph[name] = edges
    return graph


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components of more than one module (Tarjan), iteratively."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found = []
    for start in sorted(graph):
        if start in index:
            continue
        work = [(start, iter(sorted(graph[start])))]
        index[start] = low[start] = len(index)
        stack.append(start)
        on_stack.add(start)
        while work:
            node, children = work[-1]
            child = next(children, None)
            if child is not None:
                if child not in index:
                    index[child] = low[child] = len(index)
                    stack.append(child)
                    on_stack.add(child)
                    work.append((child, iter(sorted(graph[child]))))
                elif child in on_stack:
                    low[node] = min(low[node], index[child])
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[node])
            if low[node] == index[node]:
                component = []
                while True:
                    member = stack.pop()
                    on_stack.discard(member)
                    component.append(member)
                    if member == node:
                        break
                if len(component) > 1:
                    found.append(sorted(component))
    return found


def test_abm_has_no_import_cycle_at_run_time() -> None:
    graph = import_graph(PACKAGE)
    assert "abm.model" in graph and "abm.experiment.worker" in graph["abm.experiment.batch"]
    assert cycles(graph) == []


def test_the_check_finds_a_cycle_and_leaves_type_only_imports_out(tmp_path: Path) -> None:
    package = tmp_path / "pkg"
    package.mkdir()
    (package / "__init__.py").write_text("")
    (package / "a.py").write_text("from . import b\n")
    (package / "b.py").write_text("def late():\n    from .c import x\n")
    (package / "c.py").write_text("import pkg.a\nx = 1\n")
    (package / "d.py").write_text("from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    from .e import y\n")
    (package / "e.py").write_text("from .d import z\n")
    assert cycles(import_graph(package)) == [["pkg.a", "pkg.b", "pkg.c"]]
