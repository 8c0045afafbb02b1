"""The package layers (DEVELOPERS.md, "Layout"): ``service`` may import ``workers``, never the
reverse, and the engine imports no web, queue, store, schema or plotting library.

Every import of every module is walked in its syntax tree (Python's ``ast``), wherever it stands:
module level, inside functions (lazy imports) or under ``TYPE_CHECKING``; so are
``importlib.import_module``/``__import__`` calls and string constants naming a module path the way
Celery and kombu load modules (``"workers.tasks"``, ``"pkg.module:Name"``).
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
MODULE_PATH = re.compile(r"^[A-Za-z_]\w*(\.[A-Za-z_]\w*)*(:[A-Za-z_]\w*)?$")


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def imported_names(path: Path) -> list[tuple[int, str]]:
    """(line, module) for everything ``path`` imports or names for a dynamic import."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    package = _module_name(path).split(".")
    if path.name != "__init__.py":
        package = package[:-1]
    found: list[tuple[int, str]] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:  # relative: resolved against this module's package
                anchor = package[: len(package) - node.level + 1]
                base = ".".join([*anchor, base] if base else anchor)
            found += [(node.lineno, f"{base}.{alias.name}" if base else alias.name)
                      for alias in node.names]
        elif isinstance(node, ast.Call) and node.args and isinstance(node.args[0], ast.Constant):
            func = node.func
            name = func.attr if isinstance(func, ast.Attribute) else getattr(func, "id", "")
            if name in ("import_module", "__import__") and isinstance(node.args[0].value, str):
                found.append((node.lineno, node.args[0].value))
        elif isinstance(node, ast.Constant) and isinstance(node.value, str) \
                and MODULE_PATH.match(node.value) and "." in node.value:
            found.append((node.lineno, node.value.split(":")[0]))
    return found


def _offending(package: str, forbidden: tuple[str, ...]) -> list[str]:
    out = []
    for path in sorted((ROOT / package).rglob("*.py")):
        for line, name in imported_names(path):
            top = name.split(".")[0]
            if top in forbidden:
                out.append(f"{path.relative_to(ROOT)}:{line} imports {name}")
    return out


def test_nothing_under_workers_imports_service():
    assert _offending("workers", ("service",)) == []


def test_the_engine_imports_no_web_queue_store_schema_or_plotting_library():
    forbidden = ("service", "flask", "flask_smorest", "marshmallow", "celery", "kombu", "redis",
                 "matplotlib", "msgspec", "orjson")
    assert _offending("workers/engine", forbidden) == []


@pytest.mark.parametrize(("source", "expected"), [
    ("import service.app\n", ["service.app"]),
    ("def f():\n    from service.runner import run_check_json\n",
     ["service.runner.run_check_json"]),
    ("from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    from service import queue\n",
     ["typing.TYPE_CHECKING", "service.queue"]),
    ("import importlib\nimportlib.import_module('service.queue')\n",
     ["importlib", "service.queue", "service.queue"]),
    ("x = 'service.embedded:serve'\n", ["service.embedded"]),
    ("from .. import service\n", ["workers.service"]),  # relative: inside workers/
    ("from .codec import x\n", ["workers.intake.codec.x"]),
    ('"""Docstrings naming ``service.app`` are prose."""\n', []),
])
def test_the_walk_finds_every_kind_of_import(tmp_path, monkeypatch, source, expected):
    # the walker itself must not miss an import: a module two levels down, as workers/intake/x.py
    folder = tmp_path / "workers" / "intake"
    folder.mkdir(parents=True)
    path = folder / "x.py"
    path.write_text(source)
    monkeypatch.setattr(f"{__name__}.ROOT", tmp_path)
    assert sorted(n for _, n in imported_names(path)) == sorted(expected)
