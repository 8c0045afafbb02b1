"""``ballast --help`` and every subcommand's ``--help``: each argument has a help text, the exit
codes are listed, the client commands name their config file, and a usage error exits 3 (the
code of bad input; argparse's own 2 would read as "indeterminate").

The help is read as argparse prints it (its layout: an argument's invocation at two spaces'
indent, its help after it on the same line or on the next, deeper-indented lines).
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

from service.cli import build_parser

BALLAST = str(Path(sys.executable).with_name("ballast"))


def command_paths() -> list[list[str]]:
    """[], ["check"], …, ["token", "create"], …: every parser under ``ballast``."""
    import argparse

    found: list[list[str]] = []

    def walk(parser: argparse.ArgumentParser, path: list[str]) -> None:
        found.append(path)
        for action in parser._actions:
            if isinstance(action, argparse._SubParsersAction):
                for name, sub in action.choices.items():
                    walk(sub, [*path, name])

    walk(build_parser(), [])
    return found


COMMANDS = command_paths()


def help_text(path: list[str]) -> str:
    done = subprocess.run([BALLAST, *path, "--help"], capture_output=True, text=True,
                          timeout=60, check=False)
    assert done.returncode == 0, done.stderr
    return done.stdout


def argument_entries(text: str) -> dict[str, str]:
    """Invocation → help text, for every argument listed in the help's argument sections."""
    entries: dict[str, str] = {}
    current: str | None = None
    in_section = False
    for line in text.splitlines():
        if re.match(r"^\S.*:$", line):  # "options:", "positional arguments:", "server:"
            in_section = not line.startswith(("usage:", "exit codes", "server and token"))
            current = None
            continue
        if not in_section or not line.strip():
            in_section = in_section and bool(line.strip())
            current = None
            continue
        entry = re.match(r"^  (\S(?:\S| (?! ))*)(?:\s{2,}(.*))?$", line)
        if entry:
            current = entry.group(1)
            entries[current] = (entry.group(2) or "").strip()
        elif current is not None and line.startswith("    "):
            entries[current] = (entries[current] + " " + line.strip()).strip()
    return entries


def test_every_command_is_found():
    names = {" ".join(p) for p in COMMANDS}
    assert {"", "check", "serve", "worker", "submit", "status", "cancel", "results", "token",
            "token create", "token list", "token revoke"} <= names


@pytest.mark.parametrize("path", COMMANDS, ids=lambda p: " ".join(p) or "ballast")
def test_every_argument_has_help_and_the_exit_codes_are_listed(path: list[str]):
    text = help_text(path)
    entries = argument_entries(text)
    parser = build_parser()
    for name in path:  # the parser the help came from, to know how many arguments to expect
        sub = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
        parser = sub.choices[name]
    listed = [a for a in parser._actions if a.__class__.__name__ != "_SubParsersAction"]
    assert len([e for e in entries if not e.startswith(" ")]) >= len(listed), entries
    missing = [invocation for invocation, helptext in entries.items() if not helptext]
    assert missing == [], f"ballast {' '.join(path)}: no help for {missing}"
    assert re.search(r"^exit codes[^\n]*:", text, re.MULTILINE), text
    codes = set(re.findall(r"^  ([0-3])  ", text, re.MULTILINE))
    if path not in ([], ["worker"]) and "exit codes:\n  those" not in text:
        assert {"0", "3"} <= codes, text


@pytest.mark.parametrize("command", ["submit", "status", "cancel", "results"])
def test_client_commands_name_their_config_file(command: str):
    text = help_text([command])
    assert "~/.config/ballast/client.toml" in text and "$BALLAST_CONFIG" in text
    assert "$BALLAST_URL" in text and "$BALLAST_TOKEN" in text


def test_the_top_help_lists_every_exit_code_and_the_config_file():
    text = help_text([])
    assert set(re.findall(r"^  ([0-3])  ", text, re.MULTILINE)) == {"0", "1", "2", "3"}
    assert "~/.config/ballast/client.toml" in text


def test_the_id_argument_says_what_it_takes():
    for command in ("status", "cancel", "results"):
        entries = argument_entries(help_text([command]))
        assert "bat_" in entries["id"] and "chk_" in entries["id"]


def test_a_usage_error_exits_3():
    done = subprocess.run([BALLAST, "results", "--format", "yaml", "bat_x"],
                          capture_output=True, text=True, timeout=60, check=False)
    assert done.returncode == 3
    assert "invalid choice: 'yaml'" in done.stderr and done.stdout == ""
