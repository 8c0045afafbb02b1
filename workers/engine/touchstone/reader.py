"""Entry point: Touchstone text to :class:`TouchstoneData`, Version 1.0 or 2.0 by its first line."""

from __future__ import annotations

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone.comments import apply_comment_references
from workers.engine.touchstone.options import ports_from_filename
from workers.engine.touchstone.records import TouchstoneData
from workers.engine.touchstone.text import Text, check_ascii, decode_text, strip_comments
from workers.engine.touchstone.version1 import parse_version1
from workers.engine.touchstone.version2 import parse_version2


def parse_touchstone(
    text: str | bytes, *, filename: str | None = None, reference_from_comments: bool = False
) -> TouchstoneData:
    """Parse Touchstone 1.0 or 2.0 text (or the file's bytes).

    A UTF-8 byte-order mark is dropped; comments may hold any characters (bytes that are not
    UTF-8 are read as Latin-1), keywords and data must be ASCII. ``filename`` ending in .sNp
    must agree with the data's port count. Per-port reference impedances that only comment lines
    name are reported in ``notes``, and taken as the reference with ``reference_from_comments``
    (see ``comments``). Raises TouchstoneError(line, message) with a 1-based line number for
    every problem.
    """
    if isinstance(text, bytes | bytearray | memoryview):
        text = decode_text(bytes(text))
    elif text.startswith("\ufeff"):
        text = text[1:]
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    body, comments = strip_comments(text)
    check_ascii(body)
    lines = Text(body)
    first = next((i for i in range(len(lines)) if lines[i].strip()), None)
    if first is None:
        raise TouchstoneError(0, "the file holds no option line and no data")
    named_ports = ports_from_filename(filename)
    named = None if named_ports is None or filename is None else (filename, named_ports)
    if lines[first].lstrip().startswith("["):
        data = parse_version2(lines, first)
        if named is not None and data.nports != named[1]:
            raise TouchstoneError(
                first + 1,
                f"the file name {named[0]!r} says {named[1]} ports (.s{named[1]}p) but "
                f"[Number of Ports] is {data.nports}",
            )
    else:
        data = parse_version1(lines, first, named)
    return apply_comment_references(text, comments, data, take=reference_from_comments)
