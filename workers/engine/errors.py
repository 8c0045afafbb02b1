"""Errors raised by the engine. Every one is a ValueError that names the offending field."""

from __future__ import annotations


class InputError(ValueError):
    """Bad input: ``field`` is a dotted path into the check request (e.g. ``devices.1.control``)."""

    def __init__(self, field: str, message: str) -> None:
        super().__init__(f"{field}: {message}")
        self.field = field
        self.message = message


class TouchstoneError(InputError):
    """A Touchstone text that cannot be read; ``line`` is 1-based (0 when not tied to a line)."""

    def __init__(self, line: int, message: str, field: str = "touchstone") -> None:
        where = f"line {line}: " if line else ""
        super().__init__(field, f"{where}{message}")
        self.line = line
