"""README.md as a newcomer uses it: its "First check from Python" block runs as written against a
live server and prints what the README says; its shell commands call the venv's programs (or
the README's one-time activation); the folders its commands write are git-ignored.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from tests.client_live_server import live_server

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")


def section(title: str) -> str:
    match = re.search(rf"^## {re.escape(title)}\n(.*?)(?=^## |\Z)", README, re.M | re.S)
    assert match, f"README has no section {title!r}"
    return match.group(1)


def python_blocks(title: str) -> list[str]:
    """The fenced python blocks of a section, its ### subsections included."""
    return re.findall(r"^```python\n(.*?)^```$", section(title), re.M | re.S)


@pytest.mark.parametrize("index", [0, 1], ids=["from a request file", "from scikit-rf"])
def test_first_check_from_python_runs_as_written(tmp_path: Path, index: int):
    blocks = python_blocks("First check from Python")
    assert len(blocks) == 2, "the section shows a request file and a scikit-rf Network"
    code = blocks[index]
    promised = re.findall(r"^# prints: (.+)$", code, re.M)
    assert len(promised) == 1, "the block must say what it prints"
    with live_server(tmp_path / "server") as live:
        env = {k: v for k, v in os.environ.items() if not k.startswith("BALLAST_")}
        env.update(BALLAST_URL=live.url, BALLAST_TOKEN=live.token,
                   BALLAST_CONFIG=str(tmp_path / "absent.toml"))
        done = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env,
                              capture_output=True, text=True, timeout=300, check=False)
    assert done.returncode == 0, done.stderr
    assert done.stdout.splitlines() == promised


BARE = re.compile(r"(?:^|&&|;|\|)\s*(ballast|python|pip|gunicorn|pytest)\b")


def shell_lines() -> list[str]:
    """The lines of the README's indented code blocks that are not JSON."""
    lines = []
    for line in README.splitlines():
        if line.startswith("    ") and not line.lstrip().startswith(("{", "}", '"', "[", "]")):
            lines.append(line.strip())
    return lines


def test_shell_commands_use_the_venvs_programs():
    lines = shell_lines()
    assert any(line.startswith(".venv/bin/ballast ") for line in lines)  # the parser finds them
    bare = [line for line in lines if BARE.search(line)]
    assert bare == [], "README commands that need an activated venv: " + "; ".join(bare)
    assert ". .venv/bin/activate" in README  # and the one-time alternative is stated


def test_the_suite_duration_is_stated():
    assert "about 10 minutes on a 2-core machine" in section("Run the tests")


@pytest.mark.skipif(shutil.which("git") is None or not (ROOT / ".git").exists(),
                    reason="needs git and a work tree")
def test_generated_folders_are_ignored_and_sources_are_not():
    generated = ["demo/lna_nominal.s8p", "out/lna-junit.xml", "out/lna-report/index.html",
                 "var/store.sqlite3"]
    sources = ["service/demo/generate.py", "examples/request.json", "README.md"]
    done = subprocess.run(["git", "check-ignore", "--no-index", *generated, *sources],
                          cwd=ROOT, capture_output=True, text=True, timeout=60, check=False)
    assert sorted(done.stdout.split()) == sorted(generated)
