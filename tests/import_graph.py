"""Static import graph of a package, read with :mod:`ast` (nothing is imported).

Used by tests/test_architecture.py to hold the house rules of DEVELOPERS.md: no import
circles, no forbidden direction between subpackages, no use of another module's
underscore names.
"""
from __future__ import annotations

import ast
from dataclasses import dataclass, field
from pathlib import Path


@dataclass(frozen=True)
class Edge:
    """``source`` imports ``target`` (a module of the package) at ``line``."""

    source: str
    target: str
    line: int
    local: bool  # inside a function (imported when called, not when loaded)


@dataclass
class Graph:
    root: Path
    modules: dict = field(default_factory=dict)  # dotted name -> path
    edges: list = field(default_factory=list)
    private: list = field(default_factory=list)  # (source, "target.name", line)


def module_name(root: Path, path: Path) -> str:
    parts = list(path.relative_to(root.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _resolve(module: str, is_package: bool, node: ast.ImportFrom) -> str:
    if not node.level:
        return node.module or ""
    base = module.split(".")
    if not is_package:
        base = base[:-1]
    base = base[:len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def read_graph(root: Path) -> Graph:
    """Every module under the package directory ``root`` and its imports of the package."""
    root = Path(root)
    package = root.name
    g = Graph(root)
    for path in sorted(root.rglob("*.py")):
        g.modules[module_name(root, path)] = path
    for name, path in g.modules.items():
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        local_nodes = {id(n) for f in ast.walk(tree)
                       if isinstance(f, (ast.FunctionDef, ast.AsyncFunctionDef))
                       for n in ast.walk(f)}
        type_checking = {id(n) for s in ast.walk(tree) if isinstance(s, ast.If)
                         and isinstance(s.test, ast.Name) and s.test.id == "TYPE_CHECKING"
                         for n in ast.walk(s)}
        aliases = {}
        for node in ast.walk(tree):
            if id(node) in type_checking:
                continue
            local = id(node) in local_nodes
            if isinstance(node, ast.ImportFrom):
                target = _resolve(name, path.name == "__init__.py", node)
                if target.split(".")[0] != package:
                    continue
                for alias in node.names:
                    full = f"{target}.{alias.name}"
                    if full in g.modules:  # from package import submodule
                        g.edges.append(Edge(name, full, node.lineno, local))
                        aliases[alias.asname or alias.name] = full
                        continue
                    g.edges.append(Edge(name, target, node.lineno, local))
                    if alias.name.startswith("_") and not alias.name.startswith("__"):
                        g.private.append((name, full, node.lineno))
            elif isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name.split(".")[0] == package and alias.name in g.modules:
                        g.edges.append(Edge(name, alias.name, node.lineno, local))
                        if alias.asname:
                            aliases[alias.asname] = alias.name
        for node in ast.walk(tree):
            if (isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name)
                    and node.value.id in aliases and node.attr.startswith("_")
                    and not node.attr.startswith("__")):
                g.private.append((name, f"{aliases[node.value.id]}.{node.attr}",
                                  node.lineno))
    return g


def cycles(g: Graph) -> list:
    """Strongly connected components of more than one module (Tarjan 1972)."""
    adj = {m: sorted({e.target for e in g.edges if e.source == m and e.target != m
                      and e.target in g.modules}) for m in g.modules}
    index, low, stack, on, out = {}, {}, [], set(), []
    counter = [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in adj[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in g.modules:
        if v not in index:
            visit(v)
    return out


def area(module: str) -> str:
    """The subpackage (or top-level module) a module belongs to: "solvers", "api", ..."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else ""


def forbidden(g: Graph, rules: dict, allowed: set = frozenset()) -> list:
    """Edges from an area to an area it must not import; ``allowed`` holds
    (source, target) pairs exempted with a reason written beside them."""
    bad = []
    for e in g.edges:
        if (e.source, e.target) in allowed:
            continue
        if area(e.target) in rules.get(area(e.source), ()):
            bad.append(e)
    return bad
