"""Run one check request through the engine and return the verdict JSON.

Used by the ``ballast check`` command, the reports and the tests, so that they all return exactly
the engine's verdict; workers run stored requests the same way (``workers.tasks``).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from service.intake import load_request
from workers.engine import run_check
from workers.store import StoredRequest

__all__ = ["load_request", "run_check_json"]


def run_check_json(payload: Mapping[str, Any] | StoredRequest) -> dict[str, Any]:
    """Validate (or read back), run, and return the verdict as plain JSON types."""
    return run_check(load_request(payload)).to_dict()
