"""Flatten marshmallow's nested error messages into ``field.path: message`` pairs."""

from __future__ import annotations

from typing import Any


def flatten_errors(messages: Any, prefix: str = "") -> list[tuple[str, str]]:
    """[(dotted field, message), ...] from marshmallow's ``ValidationError.messages``."""
    if isinstance(messages, dict):
        out: list[tuple[str, str]] = []
        for key, value in messages.items():
            name = prefix if key == "_schema" else (f"{prefix}.{key}" if prefix else str(key))
            out += flatten_errors(value, name)
        return out
    if isinstance(messages, list | tuple):
        if all(isinstance(m, str) for m in messages):
            return [(prefix or "body", m) for m in messages]
        out = []
        for value in messages:
            out += flatten_errors(value, prefix)
        return out
    return [(prefix or "body", str(messages))]
