"""The text of a Touchstone file: comments removed, a line table, and the numbers of a region."""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Literal

import numpy as np

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone.numbers import scan_numbers
from workers.engine.touchstone.scratch import scratch_buffer

Version = Literal["1.0", "2.0"]
_KEYWORD_LINE = re.compile(r"^[ \t]*\[", re.MULTILINE)
_UTF8_BOM = b"\xef\xbb\xbf"
_UTF16_BOMS = (b"\xff\xfe", b"\xfe\xff")


def decode_text(raw: bytes) -> str:
    """A Touchstone file's bytes as text: a UTF-8 byte-order mark is dropped, UTF-8 is read as
    UTF-8, anything else as Latin-1 (one character per byte).

    Keywords and data must be ASCII, which every 8-bit encoding in use and UTF-8 share, so this
    reads them right whatever encoding the comments were written in (a degree sign in Latin-1 or
    Windows-1252, say); only the comments' own characters may come out differently.
    """
    if raw.startswith(_UTF16_BOMS):
        raise TouchstoneError(0, "the file is UTF-16 text; save it as ASCII or UTF-8 (Touchstone "
                                 "keywords and data are ASCII)")
    if raw.startswith(_UTF8_BOM):
        raw = raw[len(_UTF8_BOM):]
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        return raw.decode("latin-1")


def check_ascii(body: str) -> None:
    """Raise naming the line of the first character outside ASCII in comment-free text."""
    if body.isascii():
        return
    index = next(i for i, character in enumerate(body) if not character.isascii())
    raise TouchstoneError(
        body.count("\n", 0, index) + 1,
        f"character {body[index]!r} outside a comment: keywords and data must be ASCII (only "
        "'!' comments may hold other characters)",
    )


class Text:
    """Comment-free text with its line table; ``text[i]`` is line i (0-based)."""

    def __init__(self, body: str) -> None:
        self.body = body
        self.raw = np.frombuffer(body.encode("ascii"), dtype=np.uint8)  # ASCII: check_ascii
        is_newline = scratch_buffer("newlines", self.raw.size).view(bool)
        self.newlines = np.flatnonzero(np.equal(self.raw, 10, out=is_newline))
        self.line_start = np.concatenate(([0], self.newlines + 1))

    def __len__(self) -> int:
        return int(self.line_start.size)

    def __getitem__(self, index: int) -> str:
        end = self.newlines[index] if index < self.newlines.size else len(self.body)
        return self.body[self.line_start[index] : end]

    def offset(self, index: int) -> int:
        """Character offset where line ``index`` starts (the text length past the last line)."""
        return int(self.line_start[index]) if index < len(self) else len(self.body)

    def last_content_line(self) -> int:
        """1-based number of the last line that is not blank (0 for a blank text)."""
        stripped = self.body.rstrip()
        return stripped.count("\n") + 1 if stripped else 0

    def next_keyword_line(self, start: int) -> int:
        """First line index at or after ``start`` that begins with '[' (len(self) if none)."""
        match = _KEYWORD_LINE.search(self.body, self.offset(start))
        if match is None:
            return len(self)
        return int(np.searchsorted(self.newlines, match.start()))


@dataclass(frozen=True)
class Numbers:
    """Every number of a data region; lines are looked up on demand (1-based)."""

    values: np.ndarray
    offsets: np.ndarray
    newlines: np.ndarray
    first_line: int

    def line_of(self, token: np.ndarray) -> np.ndarray:
        return np.searchsorted(self.newlines, self.offsets[token]) + self.first_line

    def line(self, token: int) -> int:
        return int(np.searchsorted(self.newlines, self.offsets[token])) + self.first_line

    @property
    def line_starts(self) -> np.ndarray:
        """Token indices that are the first token on their line."""
        if self.values.size == 0:
            return np.empty(0, dtype=np.int64)
        line = self.line_of(np.arange(self.values.size))
        new_line = np.empty(self.values.size, dtype=bool)
        new_line[0] = True
        np.not_equal(line[1:], line[:-1], out=new_line[1:])
        return np.flatnonzero(new_line)



def strip_comments(text: str) -> tuple[str, str]:
    """(text without its '!' comments, line breaks kept; the comments themselves, joined)."""
    pieces, comments = [], []
    position = 0
    bang = text.find("!")
    while bang >= 0:
        pieces.append(text[position:bang])
        position = text.find("\n", bang)
        if position < 0:
            position = len(text)
        comments.append(text[bang:position])
        bang = text.find("!", position)
    pieces.append(text[position:])
    return "".join(pieces), "\n".join(comments)



def read_numbers(
    lines: Text, start: int, stop: int, *, version: Version, skip_options: bool = False
) -> Numbers:
    """All numbers in lines[start:stop] (comments already removed).

    A later option line inside Version 1.0 data is ignored (read again with ``skip_options``).
    """
    begin, end = lines.offset(start), lines.offset(stop)
    region = lines.body[begin:end]
    raw = lines.raw[begin:end]
    if skip_options:
        region = "\n".join("" if ln.lstrip().startswith("#") else ln for ln in region.split("\n"))
        raw = np.frombuffer(region.encode("ascii", "replace"), dtype=np.uint8)
    values, offsets, bad = scan_numbers(region, raw)
    first_nl, last_nl = np.searchsorted(lines.newlines, [begin, end])
    newlines = lines.newlines[first_nl:last_nl] - begin
    numbers = Numbers(values=values, offsets=offsets, newlines=newlines, first_line=start + 1)
    if bad >= 0:
        token = region[offsets[bad] :].split(maxsplit=1)[0]
        line = numbers.line(bad)
        if token.startswith("#"):
            if version == "1.0" and not skip_options:
                return read_numbers(lines, start, stop, version=version, skip_options=True)
            raise TouchstoneError(line, "an option line inside the network data")
        if token.startswith("[") and version == "1.0":
            raise TouchstoneError(line, f"keyword {token!r} in a Version 1.0 file (no [Version])")
        raise TouchstoneError(line, f"{token[:40]!r} is not a number")
    if values.size and not np.isfinite(values).all():
        first = int(np.flatnonzero(~np.isfinite(values))[0])
        raise TouchstoneError(numbers.line(first), "a number is out of floating-point range")
    return numbers

