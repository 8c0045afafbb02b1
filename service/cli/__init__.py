"""The ``ballast`` command: one dispatcher; each group of subcommands lives in its own module.

A module joins by exposing ``register(subparsers)``, which adds its subcommands and sets
``func`` on each; ``func(args) -> int`` returns the process exit code.
"""

from __future__ import annotations

import argparse
import importlib
import sys

EXIT_STABLE, EXIT_UNSTABLE, EXIT_INDETERMINATE, EXIT_ERROR = 0, 1, 2, 3

_COMMAND_MODULES = (
    "service.cli.check_cmd",
    "service.cli.serve_cmd",
    "service.cli.admin_cmd",
    "service.cli.client_cmds",
)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ballast",
        description="Stability verdicts for RF/microwave amplifiers from multi-port data.",
    )
    subparsers = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for name in _COMMAND_MODULES:
        try:
            module = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name == name:  # that group is not part of this build
                continue
            raise
        module.register(subparsers)
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
