"""The import graph of app/, read with ``ast``: layers point down and nothing goes round in a circle.

Rules (DEVELOPERS.md, "Layers"):

* ``app/core`` imports nothing of pairlens outside ``app/core`` except ``app/config.py``
  (thresholds) -- the kernels stay pure;
* nothing outside ``app/web`` imports ``app/web``, except the CLI's ``serve``
  command (it starts the server);
* no import circle, counting imports inside functions too (a lazy import still
  ties two modules together).
"""

from __future__ import annotations

import ast
from pathlib import Path

APP = Path(__file__).resolve().parents[1] / "app"
PACKAGE = "pairlens"


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(APP).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join([PACKAGE, *parts])


def _resolve(module: str, is_package: bool, node: ast.ImportFrom) -> list[str]:
    """Absolute pairlens modules named by a ``from ... import ...`` (each imported name that is a module too)."""
    if node.level:
        base = module.split(".") if is_package else module.split(".")[:-1]
        base = base[: len(base) - (node.level - 1)]
        target = ".".join(base + ([node.module] if node.module else []))
    else:
        target = node.module or ""
    return [target] + [f"{target}.{alias.name}" for alias in node.names]


class _Imports(ast.NodeVisitor):
    def __init__(self, module: str, is_package: bool) -> None:
        self.module, self.is_package = module, is_package
        self.found: list[tuple[str, str, int]] = []   # (target, function or "", line)
        self._function: list[str] = []

    def visit_FunctionDef(self, node):
        self._function.append(node.name)
        self.generic_visit(node)
        self._function.pop()

    visit_AsyncFunctionDef = visit_FunctionDef

    def visit_Import(self, node):
        for alias in node.names:
            self.found.append((alias.name, self._where(), node.lineno))

    def visit_ImportFrom(self, node):
        for target in _resolve(self.module, self.is_package, node):
            self.found.append((target, self._where(), node.lineno))

    def _where(self) -> str:
        return self._function[0] if self._function else ""


def import_graph() -> tuple[dict[str, set[str]], dict[str, list[tuple[str, str, int]]]]:
    """Module -> the pairlens modules it imports; and module -> (target, function, line) for messages."""
    files = {_module_name(p): p for p in APP.rglob("*.py")}
    graph: dict[str, set[str]] = {}
    detail: dict[str, list[tuple[str, str, int]]] = {}
    for module, path in files.items():
        visitor = _Imports(module, path.name == "__init__.py")
        visitor.visit(ast.parse(path.read_text(encoding="utf-8"), filename=str(path)))
        edges = [(t, f, line) for t, f, line in visitor.found
                 if t in files and t != module and not _is_package_root(t)]
        graph[module] = {t for t, _, _ in edges}
        detail[module] = edges
    return graph, detail


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan), each a circle of imports."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    out: list[list[str]] = []
    counter = [0]

    def visit(v: str) -> None:
        index[v] = low[v] = counter[0]
        counter[0] += 1
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


def _is_package_root(module: str) -> bool:
    # Python imports the package root (app/__init__.py) before any submodule, whatever the
    # import says, so an edge to it orders nothing; the root itself only loads the library
    # facade lazily on attribute access. ``from . import config`` is recorded as pairlens.config.
    return module == PACKAGE


def test_the_graph_is_read():
    # a sanity check on the reader itself: edges the code is known to have
    graph, _ = import_graph()
    assert "pairlens.core.registry" in graph["pairlens.engine"] or "pairlens.core.registry" in graph["pairlens.tiles"]
    assert "pairlens.web.workspace" in graph["pairlens.web.app"]
    assert "pairlens.web.deps" in graph["pairlens.web.api"]
    assert "pairlens.plan" in graph["pairlens.pairs"]


def test_core_imports_only_core_and_config():
    _, detail = import_graph()
    bad = [f"{m}:{line} imports {t}" for m, edges in detail.items() if m.startswith("pairlens.core")
           for t, _, line in edges
           if not (t.startswith("pairlens.core") or t == "pairlens.config" or _is_package_root(t))]
    assert not bad, "app/core must stay pure:\n" + "\n".join(bad)


def test_nothing_below_the_web_imports_the_web():
    _, detail = import_graph()
    bad = [f"{m}:{line} ({func or 'module level'}) imports {t}" for m, edges in detail.items()
           if not m.startswith("pairlens.web") for t, func, line in edges
           if t.startswith("pairlens.web") and not (m == "pairlens.cli" and func == "cmd_serve")]
    assert not bad, "only app/web and the CLI's serve may import app/web:\n" + "\n".join(bad)


def test_no_import_circle():
    graph, _ = import_graph()
    circles = _cycles(graph)
    assert not circles, "import circles:\n" + "\n".join(" <-> ".join(c) for c in circles)


def test_the_checks_can_fail():
    # The checks above must be able to fail: a circle and an upward import built by hand are found.
    assert _cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]
    tree = ast.parse("from .web import plots\nfrom ..engine import run\n")
    found = [t for node in tree.body for t in _resolve("pairlens.report", False, node)]
    assert "pairlens.web.plots" in found
    found = [t for node in tree.body[1:] for t in _resolve("pairlens.web.deps", False, node)]
    assert "pairlens.engine" in found
