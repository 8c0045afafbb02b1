"""``ballast check``: run the engine on a local file, no server needed.

    ballast check request.json
    ballast check amplifier.s6p --map map.json
    ballast check request.json --add more.json          # new samples merged in

Prints the verdict JSON (and nothing else) on stdout. Exit codes: 0 stable, 1 unstable,
2 indeterminate, 3 bad input (the error goes to stderr).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

from marshmallow import ValidationError

from service.cli import EXIT_ERROR, EXIT_INDETERMINATE, EXIT_STABLE, EXIT_UNSTABLE
from service.intake import load_request
from service.schemas.errors import flatten_errors
from service.schemas.samples import merged_request
from workers.engine import run_check
from workers.engine.errors import TouchstoneError
from workers.engine.touchstone import decode_text, parse_touchstone

VERDICT_EXIT = {"stable": EXIT_STABLE, "unstable": EXIT_UNSTABLE,
                "indeterminate": EXIT_INDETERMINATE}


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "check", help="check one circuit locally and print its verdict JSON",
        description="Run every stability indicator on one check request (JSON) or one Touchstone "
                    "file plus a port/device map, and print the verdict JSON.")
    parser.add_argument("file", type=Path, help="a check request (.json) or a Touchstone file")
    parser.add_argument("--map", dest="map_file", type=Path,
                        help="JSON with the ports and devices (and options) for a Touchstone file")
    parser.add_argument("--add", dest="added", type=Path, action="append", default=[],
                        metavar="SAMPLES",
                        help="new frequency samples to merge in before checking (repeatable): "
                             "a JSON object with the network part of a check request at new "
                             "frequencies, or a Touchstone file; a frequency given twice must "
                             "agree within options.consistency_tolerance (as POST "
                             "/v1/checks/{id}/samples)")
    parser.add_argument("--indent", type=int, default=2, help="JSON indentation (default 2)")
    parser.set_defaults(func=run)


def read_touchstone_file(file: Path) -> str:
    """A Touchstone file's text, checked against its name (a .sNp extension must name the data's
    port count): a UTF-8 byte-order mark dropped, comments in any 8-bit encoding."""
    raw = file.read_bytes()
    try:
        parse_touchstone(raw, filename=file.name)
    except TouchstoneError as exc:
        raise ValueError(f"{file}: {exc}") from exc
    return decode_text(raw)


def request_from_files(file: Path, map_file: Path | None) -> dict[str, Any]:
    """The JSON check request that ``file`` (and ``map_file``) describe."""
    if map_file is None:
        if file.suffix.lower() != ".json":
            raise ValueError(f"{file}: a Touchstone file needs --map MAP.json naming its ports "
                             "and devices")
        payload = json.loads(file.read_text(encoding="utf-8", errors="strict"))
        if not isinstance(payload, dict):
            raise ValueError(f"{file}: must hold a JSON object (one check request)")
        return payload
    mapping = json.loads(map_file.read_text(encoding="utf-8"))
    if not isinstance(mapping, dict):
        raise ValueError(f"{map_file}: must hold a JSON object with ports and devices")
    return {**mapping, "touchstone": read_touchstone_file(file)}


def samples_from_file(file: Path) -> dict[str, Any]:
    """The samples body that ``file`` holds: a JSON object, or a Touchstone file's text."""
    if file.suffix.lower() == ".json":
        body = json.loads(file.read_text(encoding="utf-8", errors="strict"))
        if not isinstance(body, dict):
            raise ValueError(f"{file}: must hold a JSON object (new samples)")
        return body
    return {"touchstone": read_touchstone_file(file)}


def run(args: argparse.Namespace) -> int:
    try:
        request = load_request(request_from_files(args.file, args.map_file))
        for added in args.added:
            try:
                request = merged_request(samples_from_file(added), request)
            except ValidationError as exc:
                for field, message in flatten_errors(exc.messages):
                    print(f"ballast check: {added}: {field}: {message}", file=sys.stderr)
                return EXIT_ERROR
        verdict = run_check(request).to_dict()
    except ValidationError as exc:
        for field, message in flatten_errors(exc.messages):
            print(f"ballast check: {field}: {message}", file=sys.stderr)
        return EXIT_ERROR
    except (OSError, UnicodeDecodeError, json.JSONDecodeError, ValueError) as exc:
        print(f"ballast check: {exc}", file=sys.stderr)
        return EXIT_ERROR
    json.dump(verdict, sys.stdout, indent=args.indent or None)
    sys.stdout.write("\n")
    return VERDICT_EXIT[verdict["verdict"]]
