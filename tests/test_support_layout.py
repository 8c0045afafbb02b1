"""The tests' import layout: shared builders live in tests/support, and nothing else is shared.

Rules (issue 11, part 4): no module under tests/ imports a test module (``test_*.py``); the
benchmarks (tests/benchmarks/) and tests/support itself import from the ``tests`` package only
what is under tests/support. Every import statement counts, lazy ones inside functions included
(``ast.walk`` over the whole module; Python's ``ast`` module is the oracle of what is imported).
"""

from __future__ import annotations

import ast
from pathlib import Path

TESTS = Path(__file__).resolve().parent


def imported_modules(source: str, package: str, packages: set[str]) -> list[tuple[int, str]]:
    """(line, absolute dotted name) of everything ``source`` imports; ``package`` is the module's
    own package, for relative imports. ``from X import a`` gives X.a when X is one of
    ``packages`` (``from tests import support``: a may be a module), else X."""
    found: list[tuple[int, str]] = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            found += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                parts = package.split(".")
                base = ".".join(parts[: len(parts) - node.level + 1])
                module = f"{base}.{node.module}" if node.module else base
            else:
                module = node.module or ""
            if module in packages:
                found += [(node.lineno, f"{module}.{alias.name}") for alias in node.names]
            else:
                found.append((node.lineno, module))
    return found


def layout_problems(files: dict[str, str]) -> list[str]:
    """Every broken rule in ``files`` (path relative to the repository root → source)."""
    problems = []
    packages = {"tests"} | {".".join(Path(path).parent.parts) for path in files
                            if Path(path).name == "__init__.py"}
    for path, source in sorted(files.items()):
        package = ".".join(Path(path).parent.parts)
        local_only = Path(path).parts[:2] in (("tests", "benchmarks"), ("tests", "support"))
        for line, module in imported_modules(source, package, packages):
            parts = module.split(".")
            if parts[0] != "tests":
                continue
            if any(part.startswith("test_") for part in parts[1:]):
                problems.append(f"{path}:{line} imports the test module {module}")
            elif local_only and parts[:2] != ["tests", "support"]:
                problems.append(f"{path}:{line} imports {module}, outside tests/support")
    return problems


def test_no_test_module_is_imported_and_benchmarks_use_only_support():
    root = TESTS.parent
    files = {str(p.relative_to(root)): p.read_text(encoding="utf-8")
             for p in TESTS.rglob("*.py") if "__pycache__" not in p.parts}
    assert "tests/support/circuits.py" in files and "tests/benchmarks/bench_engine.py" in files
    assert layout_problems(files) == []


def test_the_rules_catch_each_kind_of_import():
    # A tree that breaks every rule once, eager, lazy and relative; the checker must name each.
    files = {
        "tests/test_a.py": "from tests.test_b import helper\n",
        "tests/test_c.py": "def f():\n    from tests import test_b\n",
        "tests/test_d.py": "from .test_b import helper\n",
        "tests/benchmarks/bench_x.py": "import tests.queue_harness\n",
        "tests/benchmarks/bench_y.py": "from ..api_fixtures import tiny_request\n",
        "tests/support/helpers.py": "from tests.conftest import FakeClock\n",
        "tests/test_ok.py": "from tests.support.circuits import PortSpec\nimport numpy\n",
        "tests/benchmarks/bench_ok.py": "from tests.support import circuits\n",
    }
    assert layout_problems(files) == [
        "tests/benchmarks/bench_x.py:1 imports tests.queue_harness, outside tests/support",
        "tests/benchmarks/bench_y.py:1 imports tests.api_fixtures, outside tests/support",
        "tests/support/helpers.py:1 imports tests.conftest, outside tests/support",
        "tests/test_a.py:1 imports the test module tests.test_b",
        "tests/test_c.py:2 imports the test module tests.test_b",
        "tests/test_d.py:1 imports the test module tests.test_b",
    ]
