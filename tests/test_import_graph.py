"""The import graph between bench's subpackages has no cycle (every import, top level or inside a function).

Run as a script (``python tests/test_import_graph.py``) it prints the graph, one subpackage per line.
"""

from __future__ import annotations

import ast
from pathlib import Path

BENCH = Path(__file__).resolve().parents[1] / "bench"


def _unit(module: str) -> str | None:
    """``bench.run.plan`` -> ``run``; top-level modules (``bench.errors``) are their own unit."""
    parts = module.split(".")
    if parts[0] != "bench" or len(parts) < 2:
        return None
    return parts[1]


def import_graph(root: Path = BENCH) -> dict[str, set[str]]:
    graph: dict[str, set[str]] = {}
    for path in root.rglob("*.py"):
        rel = path.relative_to(root.parent).with_suffix("")
        module = ".".join(rel.parts)
        if module.endswith(".__init__"):
            module = module[: -len(".__init__")]
        src = _unit(module) if module != "bench" else None
        if src is None:
            continue
        src = src if (root / src).is_dir() else src  # a top-level module is a unit too
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        for node in ast.walk(tree):
            targets: list[str] = []
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                targets = [node.module]
            elif isinstance(node, ast.ImportFrom) and node.level:
                targets = [".".join(module.split(".")[: -node.level] + ([node.module] if node.module else []))]
            for t in targets:
                dst = _unit(t)
                if dst is not None and dst != src:
                    graph.setdefault(src, set()).add(dst)
        graph.setdefault(src, set())
    return graph


def find_cycle(graph: dict[str, set[str]]) -> list[str] | None:
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(n: str) -> list[str] | None:
        state[n] = 1
        stack.append(n)
        for m in sorted(graph.get(n, ())):
            if state.get(m) == 1:
                return stack[stack.index(m):] + [m]
            if m not in state:
                found = visit(m)
                if found:
                    return found
        stack.pop()
        state[n] = 2
        return None

    for n in sorted(graph):
        if n not in state:
            found = visit(n)
            if found:
                return found
    return None


def test_no_cycle_between_subpackages():
    graph = import_graph()
    assert {"run", "report", "render", "cli", "pytest_plugin", "execute", "scoring"} <= set(graph)
    cycle = find_cycle(graph)
    assert cycle is None, "import cycle between subpackages: " + " -> ".join(cycle)


def test_front_ends_do_not_import_each_other():
    graph = import_graph()
    front = {"cli", "pytest_plugin"}
    for f in front:
        assert not (graph[f] & (front - {f})), f"{f} imports {graph[f] & front}"
    assert "cli" not in graph["search"] and "cli" not in graph["run"]


def test_the_cycle_finder_finds_a_cycle():
    assert find_cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert find_cycle({"a": {"b"}, "b": set()}) is None


if __name__ == "__main__":
    g = import_graph()
    for name in sorted(g):
        print(f"{name:14s} -> {', '.join(sorted(g[name])) or '-'}")
    print("cycle:", find_cycle(g))
