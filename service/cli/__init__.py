"""The ``ballast`` command: one dispatcher; each group of subcommands lives in its own module.

A module joins by exposing ``register(subparsers)``, which adds its subcommands and sets
``func`` on each; ``func(args) -> int`` returns the process exit code. Every command's help ends
with the exit codes (``EXIT_CODES_HELP``); a usage error exits 3 like any other bad input, so that
2 always means an indeterminate verdict.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from typing import Any, NoReturn

EXIT_STABLE, EXIT_UNSTABLE, EXIT_INDETERMINATE, EXIT_ERROR = 0, 1, 2, 3

EXIT_CODES_HELP = """exit codes (for several checks, the first that applies):
  1  unstable: a check found an oscillation
  3  error: bad input or usage, a failed, cancelled or unfinished check, or the
     command itself failed (the message is on stderr)
  2  indeterminate: a verdict the data cannot settle (see its next_sweep)
  0  stable (every check), or the command did what was asked"""

PLAIN_EXIT_CODES_HELP = """exit codes:
  0  done
  3  error: bad input or usage, or the command failed (the message is on stderr)"""

CLIENT_CONFIG_HELP = """server and token of submit, status, cancel and results, first match wins:
  --url and --token; else $BALLAST_URL and $BALLAST_TOKEN; else the client config
  file: $BALLAST_CONFIG, or ~/.config/ballast/client.toml (under $XDG_CONFIG_HOME
  when that is set), TOML with the keys url = "http://..." and token = "blst_...";
  the URL defaults to http://127.0.0.1:8000."""

_COMMAND_MODULES = (
    "service.cli.check_cmd",
    "service.cli.serve_cmd",
    "service.cli.admin_cmd",
    "service.cli.client_cmds",
)


class _HelpFormatter(argparse.HelpFormatter):
    """Wraps one-paragraph texts; a text with line breaks (the epilogs) is printed as written."""

    def _fill_text(self, text: str, width: int, indent: str) -> str:
        if "\n" in text:
            return "".join(indent + line for line in text.splitlines(keepends=True))
        return super()._fill_text(text, width, indent)


class BallastArgumentParser(argparse.ArgumentParser):
    """argparse with usage errors exiting ``EXIT_ERROR`` (argparse's own 2 would read as
    "indeterminate") and the epilogs printed as written."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        kwargs.setdefault("formatter_class", _HelpFormatter)
        super().__init__(*args, **kwargs)

    def error(self, message: str) -> NoReturn:
        self.print_usage(sys.stderr)
        self.exit(EXIT_ERROR, f"{self.prog}: error: {message}\n")


def _every_parser(parser: argparse.ArgumentParser) -> list[argparse.ArgumentParser]:
    """``parser`` and its subcommands' parsers, depth first."""
    found = [parser]
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for sub in dict.fromkeys(action.choices.values()):  # aliases map to one parser
                found.extend(_every_parser(sub))
    return found


def build_parser() -> argparse.ArgumentParser:
    parser = BallastArgumentParser(
        prog="ballast",
        description="Stability verdicts for RF/microwave amplifiers from multi-port data.",
        epilog=CLIENT_CONFIG_HELP + "\n\n'ballast COMMAND --help' describes each command.",
    )
    subparsers = parser.add_subparsers(dest="command", required=True, metavar="COMMAND",
                                       help="one of:")
    for name in _COMMAND_MODULES:
        try:
            module = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name == name:  # that group is not part of this build
                continue
            raise
        module.register(subparsers)
    for each in _every_parser(parser):
        own = each.epilog or ""
        if "exit codes:" not in own:
            each.epilog = f"{own}\n\n{EXIT_CODES_HELP}" if own else EXIT_CODES_HELP
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args))
    except KeyboardInterrupt:
        print("ballast: interrupted", file=sys.stderr)
        return EXIT_ERROR


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
