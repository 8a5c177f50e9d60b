"""No import circles inside floorcast, and ``core/`` imports nothing above it.

A circle works only as long as the import order happens to suit it (a name used at
import time on both sides fails), and it hides which module is the lower layer. The
graph is read from the source with ``ast``, so imports inside functions count too:
a lazy import still ties the two modules together, it only delays the failure.
"""

from __future__ import annotations

import ast
from pathlib import Path

PKG = Path(__file__).resolve().parents[1] / "operator" / "floorcast"


def _module_name(path: Path, root: Path) -> str:
    parts = path.relative_to(root.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def import_graph(root: Path = PKG) -> dict[str, set[str]]:
    """Module -> the floorcast modules it imports (``from a import b`` counts as
    ``a.b`` when ``b`` is a module, else ``a``)."""
    modules = {_module_name(p, root): p for p in root.rglob("*.py")}
    graph: dict[str, set[str]] = {}
    for name, path in modules.items():
        deps: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                targets = [
                    f"{node.module}.{a.name}"
                    if f"{node.module}.{a.name}" in modules
                    else node.module
                    for a in node.names
                ]
            else:
                continue
            deps |= {t for t in targets if t in modules and t != name}
        graph[name] = deps
    return graph


def circles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan's algorithm,
    as in R. Tarjan, "Depth-first search and linear graph algorithms", 1972)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    out: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph.get(v, ())):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_the_checker_finds_a_circle(tmp_path):
    pkg = tmp_path / "floorcast"
    (pkg / "cli").mkdir(parents=True)
    (pkg / "__init__.py").write_text("")
    (pkg / "cli" / "__init__.py").write_text("")
    (pkg / "cli" / "a.py").write_text("from floorcast.cli import b\n")
    (pkg / "cli" / "b.py").write_text("def f():\n    from floorcast.cli.a import X\n")
    (pkg / "cli" / "c.py").write_text("from floorcast.cli.a import Y\n")
    graph = import_graph(pkg)
    assert graph["floorcast.cli.c"] == {"floorcast.cli.a"}
    assert circles(graph) == [["floorcast.cli.a", "floorcast.cli.b"]]


def test_floorcast_has_no_import_circle():
    graph = import_graph()
    assert "floorcast.core.series_text" in graph["floorcast.sources.files"]  # graph is real
    assert circles(graph) == []


def test_core_imports_only_core_and_the_shared_leaves():
    """``core/`` is the bottom layer: it may use errors and durations, nothing above."""
    leaves = {"floorcast", "floorcast.errors", "floorcast.durations", "floorcast.timefmt"}
    graph = import_graph()
    wrong = {
        (m, d)
        for m, deps in graph.items()
        if m.startswith("floorcast.core")
        for d in deps
        if not d.startswith("floorcast.core") and d not in leaves
    }
    assert wrong == set()
