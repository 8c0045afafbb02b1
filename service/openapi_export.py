"""Write the OpenAPI 3.1 document generated from the marshmallow schemas.

``python -m service.openapi_export`` writes ``openapi/openapi.json``; ``--check`` exits 1 when the
committed file differs from what the code generates.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

OPENAPI_PATH = Path(__file__).resolve().parent.parent / "openapi" / "openapi.json"


class _NoStore:
    """Generating the document needs an app, not storage."""

    retention_s = 0.0

    def ping(self) -> bool:
        return False

    def close(self) -> None:
        pass


def generate() -> dict[str, Any]:
    from service.app import create_app
    from workers.store import Stores

    def unused(*_: Any) -> bool:
        return False

    app = create_app({
        "BALLAST_STORES": Stores(_NoStore(), _NoStore()),  # type: ignore[arg-type]
        "BALLAST_ENQUEUE": unused,
        "BALLAST_WORKERS_ALIVE": unused, "BALLAST_QUEUE_REACHABLE": unused,
        "BALLAST_WITHDRAW": unused, "BALLAST_QUEUE_SIZE": unused,
    })
    with app.app_context():
        return app.extensions["flask-smorest"]["apis"][""]["ext_obj"].spec.to_dict()


def render(spec: dict[str, Any]) -> str:
    return json.dumps(spec, indent=2, sort_keys=True, ensure_ascii=False) + "\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m service.openapi_export")
    parser.add_argument("--output", type=Path, default=OPENAPI_PATH)
    parser.add_argument("--check", action="store_true",
                        help="compare with the file instead of writing it")
    args = parser.parse_args(argv)
    text = render(generate())
    if args.check:
        current = args.output.read_text() if args.output.exists() else ""
        if current != text:
            print(f"{args.output} is out of date: run python -m service.openapi_export",
                  file=sys.stderr)
            return 1
        return 0
    args.output.parent.mkdir(parents=True, exist_ok=True)
    args.output.write_text(text)
    print(args.output)
    return 0


if __name__ == "__main__":
    sys.exit(main())
