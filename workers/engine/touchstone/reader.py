"""Entry point: Touchstone text to :class:`TouchstoneData`, Version 1.0 or 2.0 by its first line."""

from __future__ import annotations

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone.options import ports_from_filename
from workers.engine.touchstone.records import TouchstoneData
from workers.engine.touchstone.text import Text, strip_comments
from workers.engine.touchstone.version1 import parse_version1
from workers.engine.touchstone.version2 import parse_version2


def parse_touchstone(text: str, *, filename: str | None = None) -> TouchstoneData:
    """Parse Touchstone 1.0 or 2.0 text; ``filename`` ending in .sNp gives a 1.0 file's port count.

    Raises TouchstoneError(line, message) with a 1-based line number for every syntax problem.
    """
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    lines = Text(strip_comments(text))
    first = next((i for i in range(len(lines)) if lines[i].strip()), None)
    if first is None:
        raise TouchstoneError(0, "the file holds no option line and no data")
    if lines[first].lstrip().startswith("["):
        return parse_version2(lines, first)
    return parse_version1(lines, first, ports_from_filename(filename))

