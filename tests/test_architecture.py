"""Architecture rules, read from the source with ``ast`` (DEVELOPERS.md, "Layout").

The layers import one way: core <- store <- jobs <- review <- web <- cli (``A <- B``: B may
import A, A never imports B). No module under app/ depends on itself through a chain of imports,
lazy ones inside functions included: the modules of such a cycle can only be loaded, understood
and changed together. The core imports no web or database code, and only the charts module
imports plotly.
"""

from __future__ import annotations

import ast
from collections import deque
from collections.abc import Iterator
from pathlib import Path

APP = Path(__file__).resolve().parents[1] / "app"
LAYERS = ["core", "store", "jobs", "review", "web", "cli"]


def _layer(module: str) -> str | None:
    parts = module.split(".")
    if parts[0] != "app" or len(parts) < 2:
        return None
    return parts[1] if parts[1] in LAYERS else None


def _module_name(path: Path, root: Path) -> str:
    """``app/jobs/executors/__init__.py`` -> ``app.jobs.executors`` (``root`` is the app folder)."""
    parts = (root.name, *path.relative_to(root).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _import_statements(path: Path, root: Path) -> Iterator[tuple[str, list[str]]]:
    """``(module, names)`` of every import anywhere in the file, relative imports resolved:
    ``import a.b`` gives ``("a.b", [])``, ``from a import b, c`` gives ``("a", ["b", "c"])``."""
    module = _module_name(path, root)
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Import):
            yield from ((alias.name, []) for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = package.rsplit(".", node.level - 1)[0] if node.level else ""
            yield ".".join(filter(None, (base, node.module))), [alias.name for alias in node.names]


def _imports(path: Path, root: Path = APP) -> set[str]:
    """Every module the file imports, and ``a.b`` for every ``from a import b`` (``b`` may be a
    submodule of ``a``)."""
    found = set()
    for module, names in _import_statements(path, root):
        found |= {module, *(f"{module}.{name}" for name in names)}
    return found


def _import_graph(root: Path) -> dict[str, set[str]]:
    """Module -> the modules under ``root`` it imports.

    ``from a import b`` is an edge to the submodule ``a.b`` when there is one, else to ``a``;
    a package importing its own submodules is no exception.
    """
    paths = {_module_name(path, root): path for path in root.rglob("*.py")}
    graph = {}
    for module, path in paths.items():
        targets = set()
        for source, names in _import_statements(path, root):
            if not names:  # import a.b
                targets.add(source)
            for name in names:
                targets.add(f"{source}.{name}" if f"{source}.{name}" in paths else source)
        graph[module] = targets & paths.keys()
    return graph


def _strongly_connected(graph: dict[str, set[str]]) -> list[set[str]]:
    """The strongly connected components of ``graph`` (Tarjan, SIAM J. Comput. 1(2), 1972)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    components = []

    def visit(node: str) -> None:
        index[node] = low[node] = len(index)
        stack.append(node)
        for successor in sorted(graph[node]):
            if successor not in index:
                visit(successor)
                low[node] = min(low[node], low[successor])
            elif successor in stack:
                low[node] = min(low[node], index[successor])
        if low[node] == index[node]:
            component = set()
            while True:
                member = stack.pop()
                component.add(member)
                if member == node:
                    break
            components.append(component)

    for node in sorted(graph):
        if node not in index:
            visit(node)
    return components


def _cycle_through(start: str, component: set[str], graph: dict[str, set[str]]) -> list[str]:
    """A shortest import chain from ``start`` back to itself within ``component``."""
    came_from: dict[str, str] = {}
    queue = deque([start])
    while queue:
        node = queue.popleft()
        for successor in sorted(graph[node] & component):
            if successor == start:
                chain = [node]
                while chain[-1] != start:
                    chain.append(came_from[chain[-1]])
                return [*reversed(chain), start]
            if successor not in came_from:
                came_from[successor] = node
                queue.append(successor)
    raise ValueError(f"{start} is on no cycle of {sorted(component)}")


def _import_cycles(root: Path) -> list[str]:
    """One import cycle per strongly connected component that has one, as ``a -> b -> a``."""
    graph = _import_graph(root)
    cycles = []
    for component in _strongly_connected(graph):
        start = min(component)
        if len(component) > 1 or start in graph[start]:
            chain = _cycle_through(start, component, graph)
            others = sorted(component - set(chain))
            cycles.append(" -> ".join(chain) + (f" (and through {', '.join(others)})" if others else ""))
    return sorted(cycles)


def test_architecture_imports_point_one_way():
    backward = []
    for path in APP.rglob("*.py"):
        own = _layer(_module_name(path, APP))
        if own is None:
            continue
        for module in _imports(path):
            other = _layer(module)
            if other and LAYERS.index(other) > LAYERS.index(own):
                backward.append(f"{path.relative_to(APP.parent)} ({own}) imports {module} ({other})")
    assert not backward, "\n".join(sorted(backward))


def test_architecture_no_import_cycles():
    cycles = _import_cycles(APP)
    assert not cycles, "import cycles:\n" + "\n".join(cycles)


def test_architecture_cycle_check_sees_lazy_relative_and_submodule_imports(tmp_path):
    # A cycle that needs every kind of edge to be seen: a lazy import inside a function, a
    # package's relative import of its own submodule, and ``import a.b.c`` of a submodule.
    root = tmp_path / "app"
    (root / "b").mkdir(parents=True)
    (root / "__init__.py").write_text("")
    (root / "a.py").write_text("def f():\n    from app.b import g\n")
    (root / "b" / "__init__.py").write_text("from . import c\ng = 1\n")
    (root / "b" / "c.py").write_text("import app.a\n")
    assert _import_cycles(root) == ["app.a -> app.b -> app.b.c -> app.a"]
    (root / "b" / "c.py").write_text("from app.b import g\n")
    assert _import_cycles(root) == ["app.b -> app.b.c -> app.b"]


def test_architecture_core_imports_no_web_or_database_code():
    forbidden = {"fastapi", "starlette", "jinja2", "sqlite3", "sqlite_utils", "uvicorn", "plotly"}
    offenders = [
        f"{path.name}: {module}"
        for path in (APP / "core").rglob("*.py")
        for module in _imports(path)
        if module.split(".")[0] in forbidden
    ]
    assert not offenders, offenders


def test_architecture_only_charts_imports_plotly():
    users = [p.relative_to(APP).as_posix() for p in APP.rglob("*.py") if any(m.split(".")[0] == "plotly" for m in _imports(p))]
    assert set(users) <= {"web/charts.py"}, users
