"""Run one JSON check request through the engine and return the verdict JSON.

Used by the ``ballast check`` command and by the queue's task, so that both return exactly the
engine's verdict.
"""

from __future__ import annotations

from typing import Any

from service.schemas.request import CheckRequestSchema
from workers.engine import run_check
from workers.engine.request import CheckRequest


def load_request(payload: dict[str, Any]) -> CheckRequest:
    """Validate a JSON check request (raises marshmallow.ValidationError naming the field)."""
    return CheckRequestSchema().load(payload)


def run_check_json(payload: dict[str, Any]) -> dict[str, Any]:
    """Validate, run, and return the verdict as plain JSON types."""
    return run_check(load_request(payload)).to_dict()
