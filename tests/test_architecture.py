"""The layers import one way: core <- store <- jobs <- web <- cli (STYLE.md; DEVELOPERS.md)."""

from __future__ import annotations

import ast
from pathlib import Path

APP = Path(__file__).resolve().parents[1] / "app"
LAYERS = ["core", "store", "jobs", "web", "cli"]


def _layer(module: str) -> str | None:
    parts = module.split(".")
    if parts[0] != "app" or len(parts) < 2:
        return None
    return parts[1] if parts[1] in LAYERS else None


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text())
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found |= {alias.name for alias in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.add(node.module)
    return found


def test_architecture_imports_point_one_way():
    backward = []
    for path in APP.rglob("*.py"):
        own = _layer("app." + ".".join(path.relative_to(APP).with_suffix("").parts))
        if own is None:
            continue
        for module in _imports(path):
            other = _layer(module)
            if other and LAYERS.index(other) > LAYERS.index(own):
                backward.append(f"{path.relative_to(APP.parent)} ({own}) imports {module} ({other})")
    assert not backward, "\n".join(backward)


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
