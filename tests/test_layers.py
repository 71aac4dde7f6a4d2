"""The package layout keeps its layers: no import circle, and every import points down.

Layers, top to bottom (DEVELOPERS.md, "Layout"):

    cli  ->  web  ->  ui  ->  store | figures  ->  state  ->  analysis  ->  (config, the package itself)

A module may import its own layer or any layer below it; ``store`` and
``figures`` sit side by side and do not import each other. Imports inside
functions count too: a lazy import is still a dependency. The import graph is
read from the source with :mod:`ast`, so nothing is executed.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE_ROOT = Path(__file__).resolve().parent.parent / "webapp"

LAYER_RANKS = {
    "base": 0,  # webapp/__init__.py (the version) and webapp/config.py: no imports from the package
    "analysis": 1,
    "state": 2,
    "store": 3,
    "distributed": 3,  # the Dask engine for long data: beside store, above analysis and state
    "figures": 3,
    "ui": 4,
    "web": 5,
    "cli": 6,
}
MAX_MODULE_LINES = 500


def layer_of(module: str) -> str:
    parts = module.split(".")
    if len(parts) == 1 or parts[1] in ("config", "__main__"):
        return "cli" if parts[-1] == "__main__" else "base"
    return parts[1]


def module_name(path: Path, root: Path = PACKAGE_ROOT) -> str:
    parts = list(path.relative_to(root.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def import_graph(root: Path = PACKAGE_ROOT) -> dict[str, set[str]]:
    """Module -> the package modules it imports (a ``from pkg import sub`` names the submodule)."""
    modules = {module_name(path, root): path for path in root.rglob("*.py")}
    graph: dict[str, set[str]] = {}
    for module, path in modules.items():
        targets: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                if node.module.split(".")[0] != "webapp":
                    continue
                named = {f"{node.module}.{alias.name}" for alias in node.names} & modules.keys()
                targets |= named or {node.module}
            elif isinstance(node, ast.Import):
                targets |= {alias.name for alias in node.names if alias.name.split(".")[0] == "webapp"}
        graph[module] = {t for t in targets if t != module}
    return graph


def layer_violations(graph: dict[str, set[str]]) -> list[str]:
    problems = []
    for module, targets in sorted(graph.items()):
        here = layer_of(module)
        for target in sorted(targets):
            there = layer_of(target)
            if there == here:
                continue
            if LAYER_RANKS[there] >= LAYER_RANKS[here]:
                problems.append(f"{module} ({here}) imports {target} ({there})")
    return problems


def import_cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Every strongly connected group of more than one module (Tarjan 1972), as sorted lists."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    groups: list[list[str]] = []

    def visit(node: str) -> None:
        index[node] = low[node] = len(index)
        stack.append(node)
        on_stack.add(node)
        for target in graph.get(node, ()):
            if target not in index:
                visit(target)
                low[node] = min(low[node], low[target])
            elif target in on_stack:
                low[node] = min(low[node], index[target])
        if low[node] == index[node]:
            group = []
            while True:
                member = stack.pop()
                on_stack.discard(member)
                group.append(member)
                if member == node:
                    break
            if len(group) > 1:
                groups.append(sorted(group))

    for node in sorted(graph):
        if node not in index:
            visit(node)
    return sorted(groups)


# --- the checks themselves can fail ------------------------------------------------------


def test_the_checker_finds_an_upward_import_and_a_circle():
    graph = {
        "webapp.analysis.pca": {"webapp.ui.layout"},  # numerics reaching up into the UI
        "webapp.ui.layout": set(),
        "webapp.web.exports": {"webapp.web.report"},
        "webapp.web.report": {"webapp.web.app"},
        "webapp.web.app": {"webapp.web.exports"},  # the circle the layout step removed
        "webapp.store.compute": {"webapp.figures.scores"},  # side by side: not allowed either
        "webapp.figures.scores": set(),
    }
    assert layer_violations(graph) == [
        "webapp.analysis.pca (analysis) imports webapp.ui.layout (ui)",
        "webapp.store.compute (store) imports webapp.figures.scores (figures)",
    ]
    assert import_cycles(graph) == [["webapp.web.app", "webapp.web.exports", "webapp.web.report"]]


def test_the_graph_is_read_from_the_source(tmp_path):
    package = tmp_path / "webapp"
    (package / "ui").mkdir(parents=True)
    (package / "__init__.py").write_text("")
    (package / "ui" / "__init__.py").write_text("")
    (package / "ui" / "view.py").write_text("def f():\n    from webapp.ui import panels\n    import webapp.config\n")
    (package / "ui" / "panels.py").write_text("from webapp import __version__\n")
    (package / "config.py").write_text("")
    graph = import_graph(package)
    assert graph["webapp.ui.view"] == {"webapp.ui.panels", "webapp.config"}  # lazy imports count
    assert graph["webapp.ui.panels"] == {"webapp"}


# --- the real package --------------------------------------------------------------------


@pytest.fixture(scope="module")
def graph():
    return import_graph()


def test_every_module_belongs_to_a_known_layer(graph):
    assert {layer_of(module) for module in graph} <= set(LAYER_RANKS)
    assert {"webapp.cli.main", "webapp.web.app", "webapp.ui.view_model", "webapp.store.storage",
            "webapp.store.compute", "webapp.figures.scores", "webapp.state", "webapp.analysis.pca"} <= set(graph)


def test_imports_point_down_the_layers(graph):
    assert layer_violations(graph) == []


def test_there_is_no_import_circle(graph):
    assert import_cycles(graph) == []


def test_the_numerics_import_only_numpy_scipy_pandas_and_themselves():
    allowed = {"numpy", "scipy", "pandas", "webapp", "__future__"}
    outside = set()
    for path in (PACKAGE_ROOT / "analysis").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                names = [alias.name for alias in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0:
                names = [node.module]
            else:
                continue
            for name in names:
                top = name.split(".")[0]
                if top not in allowed and top not in _standard_library():
                    outside.add(f"{path.relative_to(PACKAGE_ROOT)}: {name}")
                if top == "webapp" and not name.startswith("webapp.analysis"):
                    outside.add(f"{path.relative_to(PACKAGE_ROOT)}: {name}")
    assert outside == set()


def test_no_module_is_much_over_the_size_limit():
    long = {str(path.relative_to(PACKAGE_ROOT)): n for path in PACKAGE_ROOT.rglob("*.py")
            if (n := len(path.read_text(encoding="utf-8").splitlines())) > MAX_MODULE_LINES * 1.05}
    assert long == {}


def _standard_library() -> frozenset[str]:
    import sys

    return frozenset(sys.stdlib_module_names)
