"""The import graph of corridor: no circle, and the layers import downwards only.

Built from the source with :mod:`ast` (every ``import`` statement, those inside
functions included), so a circle hidden behind a lazy import counts too.
Strongly connected components are found with Tarjan's algorithm (Tarjan 1972,
"Depth-first search and linear graph algorithms", SIAM J. Comput. 1(2)).
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "corridor"

#: TEMPORARY: removed after the orchestrator merge. owned.py imports a test hook from
#: runner.py (issue 13 parts 2 and 6 remove it); no other circle is allowed.
PENDING: set[frozenset[str]] = set()


def _modules() -> dict[str, Path]:
    out = {}
    for path in PACKAGE.rglob("*.py"):
        parts = list(path.relative_to(ROOT).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


def import_graph() -> dict[str, set[str]]:
    """Module -> the corridor modules it imports (anywhere in its source)."""
    modules = _modules()

    def owner(name: str) -> str | None:
        while name and name not in modules:
            name = name.rpartition(".")[0]
        return name or None

    graph: dict[str, set[str]] = {}
    for name, path in modules.items():
        deps: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                targets = [f"{node.module}.{a.name}" for a in node.names]
            else:
                continue
            for target in targets:
                if target.split(".")[0] == "corridor":
                    dep = owner(target)
                    if dep is not None and dep != name:
                        deps.add(dep)
        graph[name] = deps
    return graph


def cycles(graph: dict[str, set[str]]) -> list[set[str]]:
    """Strongly connected components of more than one module (Tarjan)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[set[str]] = []

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
            comp = set()
            while True:
                w = stack.pop()
                on_stack.discard(w)
                comp.add(w)
                if w == v:
                    break
            if len(comp) > 1:
                found.append(comp)

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return found


def test_tarjan_finds_a_known_circle():
    # a -> b -> c -> a is one component; d hangs off it
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}
    assert cycles(graph) == [{"a", "b", "c"}]
    assert cycles({"a": {"b"}, "b": set()}) == []


def test_no_import_circle_among_corridor_modules():
    graph = import_graph()
    assert "corridor.registry" in graph and "corridor.steps.respond" in graph
    found = [c for c in cycles(graph) if frozenset(c) not in PENDING]
    assert found == [], f"import circles: {found}"


def test_settings_imports_nothing_of_corridor():
    assert import_graph()["corridor.settings"] == set()


def test_registry_config_schema_steps_layering():
    graph = import_graph()
    # the registry and the schema sit below the config and the steps
    for low in ("corridor.registry", "corridor.schema", "corridor.kinds"):
        bad = {d for d in graph[low]
               if d == "corridor.config" or d.startswith("corridor.steps")}
        assert not bad, f"{low} imports {bad}"
    # limits import nothing from the registry, config, steps or the orchestration
    for name, deps in graph.items():
        if name.startswith("corridor.limits"):
            bad = {d for d in deps if d.split(".")[1] in (
                "registry", "config", "steps", "pipeline", "runner", "kinds", "schema")}
            assert not bad, f"{name} imports {bad}"
