"""Settings: every field documented, bad values refused, imports kept one-way."""

from __future__ import annotations

import ast
import dataclasses
from pathlib import Path

import pytest

import app
from app.config import Settings

APP_DIR = Path(app.__file__).parent


def test_every_setting_is_documented():
    doc = Settings.__doc__ or ""
    for field in dataclasses.fields(Settings):
        assert f"{field.name} :" in doc, field.name


@pytest.mark.parametrize("bad", [{"port": 70000}, {"max_upload_bytes": 0}, {"page_size": 0}, {"page_size": 1001},
                                 {"request_timeout_s": 0}, {"allowed_hosts": ("two words",)}, {"allowed_hosts": ("evil.example/x",)}])
def test_bad_settings_are_refused(bad):
    with pytest.raises(ValueError):
        Settings(db_path="x.db", **bad)


def test_settings_url_and_path():
    settings = Settings(db_path="here.db", host="0.0.0.0", port=8123)
    assert settings.db_path == Path("here.db")
    assert settings.url == "http://127.0.0.1:8123/"


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text())
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names |= {alias.name for alias in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module:
            names.add(node.module)
    return names


def test_config_imports_nothing_from_app():
    assert not {n for n in _imports(APP_DIR / "config.py") if n == "app" or n.startswith("app.")}


def test_plotly_is_imported_only_by_charts():
    importers = {p.name for p in (APP_DIR / "web").rglob("*.py") if any(n.split(".")[0] == "plotly" for n in _imports(p))}
    assert importers == {"charts.py"}


def test_web_is_not_imported_by_lower_layers():
    for layer in ("core", "store", "jobs"):
        for path in (APP_DIR / layer).rglob("*.py"):
            assert not {n for n in _imports(path) if n.startswith("app.web")}, path
