"""The package's imports run one way: no module of ``fusion`` reaches itself again.

Every import statement counts, inside functions too (an import moved into a function
to dodge a circle is still a circle). The implicit import of a module's own parent
package is left out: Python runs a package's ``__init__`` before its modules, and that
order is not a dependency of the code.
"""

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "fusion"


def _module_name(path: Path) -> str:
    rel = path.relative_to(PACKAGE.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in PACKAGE.rglob("*.py")}


def _resolve(current: str, is_package: bool, level: int, module: str | None) -> str:
    base = current.split(".") if is_package else current.split(".")[:-1]
    if level > 1:
        base = base[: len(base) - (level - 1)]
    return ".".join(base + ([module] if module else []))


def import_graph(modules: dict[str, Path]) -> dict[str, set[str]]:
    """Edges module -> modules of the package it imports (by any import statement)."""
    graph = {}
    for name, path in modules.items():
        is_package = path.name == "__init__.py"
        edges = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            targets = []
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                base = (_resolve(name, is_package, node.level, node.module) if node.level
                        else node.module or "")
                subs = [f"{base}.{a.name}" for a in node.names]
                # `from . import _mod` loads the module; `from .mod import name` loads .mod
                targets = subs if node.module is None else [base] + subs
            for t in targets:
                # the deepest module of the package the target names (a name imported from a
                # module is not a module of its own)
                while t and t not in modules:
                    t = t.rpartition(".")[0]
                if t and t != name:
                    edges.add(t)
        graph[name] = edges
    return graph


def circles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components of more than one module (Tarjan's algorithm)."""
    index, low, stack, on, out = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in sorted(graph.get(v, ())):
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

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_the_package_has_no_import_circle():
    found = circles(import_graph(_modules()))
    assert not found, "import circles (break each by moving the shared part into a lower module): " + \
        "; ".join(" <-> ".join(c) for c in found)


def test_a_circle_hidden_inside_a_function_is_found(tmp_path):
    # the check itself must be able to fail: two modules, one importing the other at the top
    # and the other importing back inside a function
    global PACKAGE
    pkg = tmp_path / "fusion"
    (pkg / "sub").mkdir(parents=True)
    (pkg / "__init__.py").write_text("")
    (pkg / "sub" / "__init__.py").write_text("from ._a import f\n")
    (pkg / "sub" / "_a.py").write_text("from ._b import g\n\ndef f():\n    return g()\n")
    (pkg / "sub" / "_b.py").write_text("def g():\n    from ._a import f\n    return f\n")
    saved, PACKAGE = PACKAGE, pkg
    try:
        found = circles(import_graph(_modules()))
    finally:
        PACKAGE = saved
    assert found == [["fusion.sub._a", "fusion.sub._b"]]


@pytest.mark.parametrize("layer, below", [
    ("fusion.run", ("fusion.api", "fusion.campaign", "fusion.cli", "fusion.demo")),
    ("fusion.campaign", ("fusion.api", "fusion.cli", "fusion.demo")),
    ("fusion.api", ("fusion.campaign", "fusion.cli", "fusion.demo")),
])
def test_composition_layers_import_downward_only(layer, below):
    graph = import_graph(_modules())
    wrong = sorted((m, t) for m, ts in graph.items() if m == layer or m.startswith(layer + ".")
                   for t in ts if any(t == b or t.startswith(b + ".") for b in below))
    assert not wrong, f"{layer} imports from above it: {wrong}"
