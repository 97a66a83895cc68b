"""No import cycles: the modules of warmstart/ and cli/ import each other in one direction.

The graph has an edge A -> B when module A imports B when A is first imported: the
import statements of its body (also inside ``if``/``try`` blocks and class bodies),
not those inside functions (lazy imports, run later) nor under ``if TYPE_CHECKING:``
(never run). ``from package import name`` is an edge to the submodule ``package.name``
when there is one, else to the package itself (its ``__init__``).
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _modules(root: Path, packages: tuple[str, ...]) -> dict[str, Path]:
    out = {}
    for pkg in packages:
        for f in sorted((root / pkg).rglob("*.py")):
            parts = list(f.relative_to(root).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts = parts[:-1]
            out[".".join(parts)] = f
    return out


def _type_checking(node: ast.If) -> bool:
    t = node.test
    return (isinstance(t, ast.Name) and t.id == "TYPE_CHECKING") or (
        isinstance(t, ast.Attribute) and t.attr == "TYPE_CHECKING")


def _import_time_imports(tree: ast.Module):
    stack: list[ast.AST] = list(tree.body)
    while stack:
        node = stack.pop()
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.Lambda)):
            continue
        if isinstance(node, ast.If) and _type_checking(node):
            stack.extend(node.orelse)
            continue
        if isinstance(node, (ast.Import, ast.ImportFrom)):
            yield node
        else:
            stack.extend(ast.iter_child_nodes(node))


def import_graph(root: Path, packages: tuple[str, ...]) -> dict[str, set[str]]:
    """Module -> the project modules it imports at import time."""
    mods = _modules(root, packages)
    graph: dict[str, set[str]] = {m: set() for m in mods}
    for mod, path in mods.items():
        for node in _import_time_imports(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            else:
                base = node.module or ""
                if node.level:  # relative: from the module's package upwards
                    pkg = mod.split(".") if path.name == "__init__.py" else mod.split(".")[:-1]
                    pkg = pkg[:len(pkg) - node.level + 1]
                    base = ".".join(pkg + ([base] if base else []))
                targets = [f"{base}.{a.name}" if f"{base}.{a.name}" in mods else base
                           for a in node.names]
            for target in targets:
                while target and target not in mods:  # a name inside a module
                    target = target.rpartition(".")[0]
                if target and target != mod:
                    graph[mod].add(target)
    return graph


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """The graph's strongly connected components of more than one module (Tarjan)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                found.append(sorted(component))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return found


def test_the_graph_sees_cycles_and_ignores_lazy_and_type_only_imports(tmp_path):
    # reference: the Python import system - module bodies run on first import; function
    # bodies and `if TYPE_CHECKING:` blocks do not
    pkg = tmp_path / "pkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "a.py").write_text("from pkg import b\n")
    (pkg / "b.py").write_text("from . import c\n")
    (pkg / "c.py").write_text("try:\n    import pkg.a\nexcept ImportError:\n    pass\n")
    (pkg / "d.py").write_text("def f():\n    from pkg import e\n")
    (pkg / "e.py").write_text("from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n"
                              "    from pkg.d import f\nfrom pkg.a import x\n")
    graph = import_graph(tmp_path, ("pkg",))
    assert graph["pkg.b"] == {"pkg.c"} and graph["pkg.d"] == set()
    assert graph["pkg.e"] == {"pkg.a"}
    assert cycles(graph) == [["pkg.a", "pkg.b", "pkg.c"]]


def test_warmstart_and_cli_have_no_import_cycle():
    graph = import_graph(ROOT, ("warmstart", "cli"))
    assert "warmstart.maintenance" in graph["warmstart.history"]  # the graph is real
    assert any(m.startswith("warmstart") for m in graph["cli.main"])
    assert cycles(graph) == []
