"""Touchstone reader: Version 1.0 (.sNp) and Version 2.0 text to frequency-first network matrices.

Source: Touchstone(R) File Format Specification Version 2.0, IBIS Open Forum, ratified 24 April 2009
(below "TS2"). The rules this module relies on, by TS2 section:

- "Option Line": ``# <frequency unit> <parameter> <format> R <n>``; defaults GHz, S, MA, R 50;
  units Hz, kHz, MHz, GHz; formats RI (real, imaginary), MA (magnitude, angle),
  DB (20*log10|N|, angle); angles in degrees; case-insensitive. H and G parameters exist in the
  format but are refused here.
- "Option Line", normalisation. Version 1.0: network data are normalised to the reference
  resistance R (TS2 Example 9: "Z11 is normalized to 75 ohms, as given by the reference impedance
  (R 75)"), so Z = z*R; for admittance the normalised value is y = Y/(1/R) (common practice), so
  Y = y/R. Version 2.0 (TS2 page 7, "Option Line"): "Network data for G-, H-, Y- and Z-parameters
  in Version 2.0 files is not normalized. Therefore, the reference resistance and [Reference]
  keyword have no impact on G-, H-, Y-, or Z-parameter data in Version 2.0 files." So Version 2.0
  Y and Z are taken as siemens and ohms. Where this was read: the specification PDF itself was not
  in the searchable store; the sentence is quoted verbatim from it in a public users' mailing-list
  post, and the IBIS Open Forum's draft announcement says the same
  ("normalization is removed for G-, H-, Y- and Z-parameters").
- "[Network Data]", 1-port and 2-port networks: Version 1.0 two-port order is N11 N21 N12 N22;
  "[Two-Port Data Order]" 21_12 keeps that order, 12_21 is N11 N12 N21 N22 (read from a parser
  summary of TS2 and matching scikit-rf 2.2's reader; not checked against the PDF itself).
- "3-port and 4-port Networks", "5-port and Above": matrix rows in order, at most four pairs per
  line in Version 1.0, each row starting a new line.
- "[Matrix Format]": Lower / Upper give the triangle including the diagonal, row by row; the other
  half follows from symmetry.
- "[Noise Data]" / Version 1.0 noise block: a frequency not larger than the previous one starts the
  two-port noise block. Noise parameters are read past and dropped.

Numbers are read by a vectorised scanner (numpy over the raw bytes); tokens it does not recognise
are checked one by one with the strict Touchstone number grammar and ``float``.
"""

from __future__ import annotations

import math
import re
import threading
from dataclasses import dataclass
from typing import Literal

import numpy as np

from workers.engine.errors import TouchstoneError

Parameter = Literal["S", "Y", "Z"]
Version = Literal["1.0", "2.0"]
DataFormat = Literal["RI", "MA", "DB"]
MatrixFormat = Literal["full", "lower", "upper"]

MAX_PORTS = 64
MAX_FREQUENCIES = 100_000

_UNITS_HZ = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_FORMATS: dict[str, DataFormat] = {"ri": "RI", "ma": "MA", "db": "DB"}
_PARAMETERS: dict[str, Parameter] = {"s": "S", "y": "Y", "z": "Z"}
_SNP_EXTENSION = re.compile(r"\.s(\d+)p\Z", re.IGNORECASE)
_KEYWORD = re.compile(r"\[([^\]]*)\](.*)\Z")
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
_KEYWORD_LINE = re.compile(r"^[ \t]*\[", re.MULTILINE)
_POW10 = np.array([10.0**k for k in range(309)])
_MAX_TOKEN_WIDTH = 64
_SCRATCH_LIMIT_BYTES = 256 * 1024 * 1024
_scratch_buffers = threading.local()


def _scratch(name: str, size: int) -> np.ndarray:
    """A per-thread uint8 buffer of ``size`` bytes, kept between calls.

    Fresh memory is paid for in page faults on first touch, which dominated the scanner's time;
    reusing the same buffers avoids that. Contents are garbage on entry.
    """
    buffers = _scratch_buffers.__dict__
    buffer = buffers.get(name)
    if buffer is None or buffer.size < size:
        buffer = np.empty(max(size, 1), dtype=np.uint8)
        if size <= _SCRATCH_LIMIT_BYTES:
            buffers[name] = buffer
    return buffer[:size]


@dataclass(frozen=True, eq=False)
class TouchstoneData:
    """One parsed Touchstone file; arrays are read-only.

    ``values`` is (F, N, N) complex, de-normalised: S as given, Y in siemens, Z in ohms.
    ``z0_ohm`` is the reference resistance of each port (N,).
    """

    frequency_hz: np.ndarray
    parameter: Parameter
    values: np.ndarray
    z0_ohm: np.ndarray
    version: Version
    nports: int


@dataclass(frozen=True)
class _Options:
    unit_hz: float = 1e9
    parameter: Parameter = "S"
    data_format: DataFormat = "MA"
    resistance: tuple[float, ...] = (50.0,)


class _Text:
    """Comment-free text with its line table; ``text[i]`` is line i (0-based)."""

    def __init__(self, body: str) -> None:
        self.body = body
        self.raw = np.frombuffer(body.encode("ascii", "replace"), dtype=np.uint8)
        is_newline = _scratch("newlines", self.raw.size).view(bool)
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
class _Numbers:
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


def parse_touchstone(text: str, *, filename: str | None = None) -> TouchstoneData:
    """Parse Touchstone 1.0 or 2.0 text; ``filename`` ending in .sNp gives a 1.0 file's port count.

    Raises TouchstoneError(line, message) with a 1-based line number for every syntax problem.
    """
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    lines = _Text(_strip_comments(text))
    first = next((i for i in range(len(lines)) if lines[i].strip()), None)
    if first is None:
        raise TouchstoneError(0, "the file holds no option line and no data")
    if lines[first].lstrip().startswith("["):
        return _parse_version2(lines, first)
    return _parse_version1(lines, first, _ports_from_filename(filename))


def _strip_comments(text: str) -> str:
    """Remove every '!' comment up to its line end, keeping the line breaks."""
    pieces = []
    position = 0
    bang = text.find("!")
    while bang >= 0:
        pieces.append(text[position:bang])
        position = text.find("\n", bang)
        if position < 0:
            position = len(text)
        bang = text.find("!", position)
    pieces.append(text[position:])
    return "".join(pieces)


# ---------------------------------------------------------------------------------------- v1.0


def _parse_version1(lines: _Text, first: int, nports: int | None) -> TouchstoneData:
    option_line = lines[first].strip()
    if not option_line.startswith("#"):
        raise TouchstoneError(
            first + 1, "the option line ('# <unit> <parameter> <format> R <n>') must come first"
        )
    options = _parse_option_line(option_line, first + 1)
    numbers = _read_numbers(lines, first + 1, len(lines), version="1.0")
    if numbers.values.size == 0:
        raise TouchstoneError(first + 1, "no network data after the option line")
    if nports is None:
        nports = _infer_ports(numbers)
    _check_ports(nports, numbers.line(0))
    record_length = 1 + 2 * nports * nports
    count = _count_records(
        numbers, record_length, noise_may_follow=nports == 2, layout=_v1_layout(nports)
    )
    records = numbers.values[: count * record_length].reshape(count, record_length)
    matrices = _assemble(_to_complex(records[:, 1:], options.data_format), nports, "full")
    if nports == 2:  # TS2 "1-port and 2-port Networks": Version 1.0 order is N11 N21 N12 N22
        matrices = matrices.transpose(0, 2, 1)
    z0 = _port_references(options.resistance, nports, first + 1)
    if options.parameter != "S":
        if np.ptp(z0) != 0.0:
            raise TouchstoneError(
                first + 1, "Y and Z data with a different R per port are not supported"
            )
        # Version 1.0 data are normalised to R: z = Z/R and y = Y*R (see module docstring).
        matrices = matrices * z0[0] if options.parameter == "Z" else matrices / z0[0]
    return _result(records[:, 0] * options.unit_hz, options.parameter, matrices, z0, "1.0")


def _infer_ports(numbers: _Numbers) -> int:
    """N from the first record: it runs from the first line to the next line with an odd count.

    A record's first line holds the frequency and whole pairs (odd count); continuation lines hold
    whole pairs only (even count).
    """
    starts = numbers.line_starts
    counts = np.diff(np.append(starts, numbers.values.size))
    first_line = numbers.line(0)
    if counts[0] % 2 == 0:
        raise TouchstoneError(
            first_line, f"a frequency record needs the frequency and whole pairs, found {counts[0]}"
        )
    later_odd = np.flatnonzero(counts[1:] % 2 == 1)
    length = int(starts[later_odd[0] + 1]) if later_odd.size else int(numbers.values.size)
    pairs = (length - 1) // 2
    nports = math.isqrt(pairs)
    if nports * nports != pairs:
        raise TouchstoneError(
            first_line,
            f"the first frequency record holds {length - 1} numbers, which is 2*N*N for no port "
            "count N",
        )
    return nports


def _v1_layout(nports: int) -> list[int]:
    """Numbers per line of one Version 1.0 record: rows of at most four pairs, frequency first."""
    if nports <= 2:
        return [1 + 2 * nports * nports]
    row = [8] * (nports // 4) + ([2 * (nports % 4)] if nports % 4 else [])
    layout = row * nports
    layout[0] += 1
    return layout


# ---------------------------------------------------------------------------------------- v2.0


@dataclass
class _Header2:
    options: _Options | None = None
    nports: int | None = None
    two_port_order: str | None = None
    frequencies: int | None = None
    noise_frequencies: int | None = None
    reference: list[float] | None = None
    reference_line: int = 0
    matrix_format: MatrixFormat = "full"
    seen: dict[str, int] | None = None


def _parse_version2(lines: _Text, first: int) -> TouchstoneData:
    keyword, argument = _keyword(lines[first], first + 1)
    if keyword != "version":
        raise TouchstoneError(first + 1, "a Version 2.0 file must begin with [Version] 2.0")
    if argument.split() != ["2.0"]:
        raise TouchstoneError(first + 1, f"unsupported [Version] {argument.strip()!r}; only 2.0")
    header = _Header2(seen={"version": first + 1})
    index = _read_header2(lines, first + 1, header)
    network_line = index + 1
    _require(header, network_line)
    assert header.nports is not None and header.frequencies is not None
    assert header.options is not None
    stop = lines.next_keyword_line(index + 1)
    numbers = _read_numbers(lines, index + 1, stop, version="2.0")
    pairs = _pairs_per_record(header.nports, header.matrix_format)
    record_length = 1 + 2 * pairs
    _check_record_count(numbers, record_length, header.frequencies, stop + 1, lines)
    records = numbers.values.reshape(header.frequencies, record_length)
    _check_increasing(numbers, records[:, 0], record_length)
    _read_tail2(lines, stop, header)
    matrices = _assemble(
        _to_complex(records[:, 1:], header.options.data_format), header.nports, header.matrix_format
    )
    if header.nports == 2 and header.matrix_format == "full" and header.two_port_order == "21_12":
        matrices = matrices.transpose(0, 2, 1)
    if header.reference is not None:
        z0 = np.array(header.reference)
    else:
        z0 = _port_references(header.options.resistance, header.nports, header.seen["option"])
    # TS2: Version 2.0 Y and Z data are not normalised; they are taken as siemens and ohms.
    frequency = records[:, 0] * header.options.unit_hz
    return _result(frequency, header.options.parameter, matrices, z0, "2.0")


def _read_header2(lines: _Text, start: int, header: _Header2) -> int:
    """Read keywords up to [Network Data]; return that line's index."""
    assert header.seen is not None
    index = start
    in_information = False
    while index < len(lines):
        line = lines[index].strip()
        number = index + 1
        index += 1
        if not line:
            continue
        if in_information:
            if line.startswith("[") and _keyword(line, number)[0] == "end information":
                in_information = False
            continue
        if header.reference is not None and len(header.reference) < (header.nports or 0):
            if not line.startswith("["):
                header.reference.extend(_reference_values(line, number))
                _check_reference_count(header, number)
                continue
            raise TouchstoneError(
                header.reference_line,
                f"[Reference] needs {header.nports} values, found {len(header.reference)}",
            )
        if line.startswith("#"):
            if "option" in header.seen:
                raise TouchstoneError(number, "a second option line")
            if header.nports is not None:
                raise TouchstoneError(number, "the option line must come before [Number of Ports]")
            header.seen["option"] = number
            header.options = _parse_option_line(line, number)
            continue
        if not line.startswith("["):
            raise TouchstoneError(number, f"unexpected text before [Network Data]: {line[:40]!r}")
        keyword, argument = _keyword(line, number)
        if keyword in header.seen:
            raise TouchstoneError(number, f"[{keyword}] appears twice")
        header.seen[keyword] = number
        if keyword == "network data":
            if argument.strip():
                raise TouchstoneError(number, "[Network Data] takes no argument")
            return index - 1
        if "option" not in header.seen:
            raise TouchstoneError(number, "the option line must follow [Version]")
        if keyword != "number of ports" and header.nports is None:
            raise TouchstoneError(number, "[Number of Ports] must follow the option line")
        if keyword == "begin information":
            in_information = True
        else:
            _apply_keyword2(header, keyword, argument, number)
    raise TouchstoneError(lines.last_content_line(), "missing [Network Data]")


def _apply_keyword2(header: _Header2, keyword: str, argument: str, number: int) -> None:
    words = argument.split()
    if keyword == "number of ports":
        header.nports = _positive_int(words, number, "[Number of Ports]")
        _check_ports(header.nports, number)
    elif keyword == "two port data order":
        if header.nports != 2:
            raise TouchstoneError(number, "[Two-Port Data Order] is only for 2-port data")
        if words not in (["12_21"], ["21_12"]):
            raise TouchstoneError(number, "[Two-Port Data Order] must be 12_21 or 21_12")
        header.two_port_order = words[0]
    elif keyword == "number of frequencies":
        header.frequencies = _positive_int(words, number, "[Number of Frequencies]")
        if header.frequencies > MAX_FREQUENCIES:
            raise TouchstoneError(
                number, f"{header.frequencies} frequencies; at most {MAX_FREQUENCIES} are accepted"
            )
    elif keyword == "number of noise frequencies":
        header.noise_frequencies = _positive_int(words, number, "[Number of Noise Frequencies]")
    elif keyword == "reference":
        header.reference = _reference_values(argument, number)
        header.reference_line = number
        _check_reference_count(header, number)
    elif keyword == "matrix format":
        if len(words) != 1 or words[0].lower() not in ("full", "lower", "upper"):
            raise TouchstoneError(number, "[Matrix Format] must be Full, Lower or Upper")
        header.matrix_format = words[0].lower()  # type: ignore[assignment]
    elif keyword == "mixed mode order":
        raise TouchstoneError(number, "mixed-mode data ([Mixed-Mode Order]) is not supported")
    else:
        raise TouchstoneError(number, f"unknown or misplaced keyword [{keyword}]")


def _require(header: _Header2, network_line: int) -> None:
    if header.options is None:
        raise TouchstoneError(network_line, "missing option line")
    if header.nports is None:
        raise TouchstoneError(network_line, "missing [Number of Ports]")
    if header.frequencies is None:
        raise TouchstoneError(network_line, "missing [Number of Frequencies]")
    if header.nports == 2 and header.two_port_order is None:
        raise TouchstoneError(network_line, "missing [Two-Port Data Order] (needed for 2 ports)")
    if header.reference is not None and len(header.reference) < header.nports:
        raise TouchstoneError(
            header.reference_line,
            f"[Reference] needs {header.nports} values, found {len(header.reference)}",
        )


def _read_tail2(lines: _Text, stop: int, header: _Header2) -> None:
    """After the network data: optional [Noise Data] (skipped), then [End] and nothing else."""
    if stop >= len(lines):
        raise TouchstoneError(lines.last_content_line(), "missing [End]")
    keyword, argument = _keyword(lines[stop], stop + 1)
    if keyword == "noise data":
        if header.noise_frequencies is None:
            raise TouchstoneError(stop + 1, "[Noise Data] without [Number of Noise Frequencies]")
        stop = lines.next_keyword_line(stop + 1)
        if stop >= len(lines):
            raise TouchstoneError(lines.last_content_line(), "missing [End]")
        keyword, argument = _keyword(lines[stop], stop + 1)
    elif header.noise_frequencies is not None:
        raise TouchstoneError(stop + 1, "[Number of Noise Frequencies] given but no [Noise Data]")
    if keyword != "end" or argument.strip():
        raise TouchstoneError(stop + 1, f"expected [End], found [{keyword}]")
    for index in range(stop + 1, len(lines)):
        if lines[index].strip():
            raise TouchstoneError(index + 1, "text after [End]")


def _keyword(line: str, number: int) -> tuple[str, str]:
    match = _KEYWORD.match(line.strip())
    if match is None:
        raise TouchstoneError(number, f"malformed keyword {line.strip()[:40]!r}")
    name = " ".join(match.group(1).lower().replace("-", " ").replace("_", " ").split())
    return name, match.group(2)


def _positive_int(words: list[str], number: int, what: str) -> int:
    if len(words) != 1 or not words[0].isdigit() or int(words[0]) < 1:
        raise TouchstoneError(number, f"{what} needs one positive whole number")
    return int(words[0])


def _reference_values(text: str, number: int) -> list[float]:
    values = []
    for word in text.split():
        if not _NUMBER.fullmatch(word) or not float(word) > 0.0:
            raise TouchstoneError(number, f"[Reference] value {word!r} is not a positive number")
        values.append(float(word))
    return values


def _check_reference_count(header: _Header2, number: int) -> None:
    assert header.reference is not None
    if len(header.reference) > (header.nports or 0):
        raise TouchstoneError(
            number, f"[Reference] needs {header.nports} values, found {len(header.reference)}"
        )


def _pairs_per_record(nports: int, matrix_format: MatrixFormat) -> int:
    return nports * nports if matrix_format == "full" else nports * (nports + 1) // 2


def _check_record_count(
    numbers: _Numbers, record_length: int, declared: int, end_line: int, lines: _Text
) -> None:
    """Version 2.0: the network data must hold exactly [Number of Frequencies] records."""
    total = numbers.values.size
    if total == declared * record_length:
        return
    if total == 0:
        raise TouchstoneError(end_line, "no network data")
    full = _count_records(numbers, record_length, noise_may_follow=False, layout=None)
    if full > declared:
        line = numbers.line(declared * record_length)
        raise TouchstoneError(line, f"more frequencies than [Number of Frequencies] {declared}")
    raise TouchstoneError(
        min(end_line, lines.last_content_line()),
        f"[Number of Frequencies] is {declared} but the network data holds {full}",
    )


# ------------------------------------------------------------------------------- shared parts


def _ports_from_filename(filename: str | None) -> int | None:
    if filename is None:
        return None
    match = _SNP_EXTENSION.search(filename)
    if match is None:
        return None
    nports = int(match.group(1))
    _check_ports(nports, 0)
    return nports


def _check_ports(nports: int, line: int) -> None:
    if not 1 <= nports <= MAX_PORTS:
        raise TouchstoneError(line, f"{nports} ports; 1 to {MAX_PORTS} are accepted")


def _parse_option_line(line: str, number: int) -> _Options:
    """TS2 "Option Line": ``# [unit] [parameter] [format] [R n]``, any order; GHz S MA 50."""
    words = line[1:].lower().split()
    found: dict[str, object] = {}
    index = 0
    while index < len(words):
        word = words[index]
        index += 1
        if word in _UNITS_HZ:
            key, value = "unit", _UNITS_HZ[word]
        elif word in _PARAMETERS:
            key, value = "parameter", _PARAMETERS[word]
        elif word in ("h", "g"):
            raise TouchstoneError(
                number, f"{word.upper()}-parameters are not supported; use S, Y or Z data"
            )
        elif word in _FORMATS:
            key, value = "format", _FORMATS[word]
        elif word == "r":
            resistances = []
            while index < len(words) and _NUMBER.fullmatch(words[index]):
                resistances.append(float(words[index]))
                index += 1
            if not resistances or not all(r > 0.0 for r in resistances):
                raise TouchstoneError(number, "R must be followed by a positive resistance in ohms")
            key, value = "resistance", tuple(resistances)
        else:
            raise TouchstoneError(number, f"unknown option {word!r} on the option line")
        if key in found:
            raise TouchstoneError(number, f"the option line gives the {key} twice")
        found[key] = value
    return _Options(**{_OPTION_FIELDS[k]: v for k, v in found.items()})  # type: ignore[arg-type]


_OPTION_FIELDS = {
    "unit": "unit_hz",
    "parameter": "parameter",
    "format": "data_format",
    "resistance": "resistance",
}


def _port_references(resistance: tuple[float, ...], nports: int, line: int) -> np.ndarray:
    if len(resistance) == 1:
        return np.full(nports, resistance[0])
    if len(resistance) != nports:
        raise TouchstoneError(line, f"R gives {len(resistance)} resistances for {nports} ports")
    return np.array(resistance)


def _read_numbers(
    lines: _Text, start: int, stop: int, *, version: Version, skip_options: bool = False
) -> _Numbers:
    """All numbers in lines[start:stop] (comments already removed).

    A later option line inside Version 1.0 data is ignored (read again with ``skip_options``).
    """
    begin, end = lines.offset(start), lines.offset(stop)
    region = lines.body[begin:end]
    raw = lines.raw[begin:end]
    if skip_options:
        region = "\n".join("" if ln.lstrip().startswith("#") else ln for ln in region.split("\n"))
        raw = np.frombuffer(region.encode("ascii", "replace"), dtype=np.uint8)
    values, offsets, bad = _scan_numbers(region, raw)
    first_nl, last_nl = np.searchsorted(lines.newlines, [begin, end])
    newlines = lines.newlines[first_nl:last_nl] - begin
    numbers = _Numbers(values=values, offsets=offsets, newlines=newlines, first_line=start + 1)
    if bad >= 0:
        token = region[offsets[bad] :].split(maxsplit=1)[0]
        line = numbers.line(bad)
        if token.startswith("#"):
            if version == "1.0" and not skip_options:
                return _read_numbers(lines, start, stop, version=version, skip_options=True)
            raise TouchstoneError(line, "an option line inside the network data")
        if token.startswith("[") and version == "1.0":
            raise TouchstoneError(line, f"keyword {token!r} in a Version 1.0 file (no [Version])")
        raise TouchstoneError(line, f"{token[:40]!r} is not a number")
    if values.size and not np.isfinite(values).all():
        first = int(np.flatnonzero(~np.isfinite(values))[0])
        raise TouchstoneError(numbers.line(first), "a number is out of floating-point range")
    return numbers


def _count_records(
    numbers: _Numbers, record_length: int, *, noise_may_follow: bool, layout: list[int] | None
) -> int:
    """Number of whole network records; each must begin a line and frequencies must increase.

    With ``noise_may_follow`` (Version 1.0, 2 ports) a record whose frequency is not larger than
    the one before starts the noise block, which ends the network data.
    """
    total = numbers.values.size
    if total // record_length > MAX_FREQUENCIES + 1:
        line = numbers.line(MAX_FREQUENCIES * record_length)
        raise TouchstoneError(line, f"more than {MAX_FREQUENCIES} frequencies")
    starts = np.arange(0, total, record_length)
    aligned = np.ones(starts.size, dtype=bool)
    aligned[1:] = numbers.line_of(starts[1:]) != numbers.line_of(starts[1:] - 1)
    frequencies = numbers.values[starts]
    not_increasing = np.zeros(starts.size, dtype=bool)
    not_increasing[1:] = frequencies[1:] <= frequencies[:-1]
    trouble = np.flatnonzero(~aligned | not_increasing | (frequencies < 0))
    if trouble.size == 0:
        if total % record_length:
            raise _count_error(numbers, int(starts[-1]), record_length, layout)
        count = starts.size
    else:
        k = int(trouble[0])
        line = numbers.line(starts[k])
        if not aligned[k]:
            raise _count_error(numbers, int(starts[k - 1]), record_length, layout)
        if frequencies[k] < 0:
            raise TouchstoneError(line, "negative frequency")
        if not noise_may_follow:
            raise TouchstoneError(line, "frequencies must increase from one record to the next")
        count = k
    if count > MAX_FREQUENCIES:
        line = numbers.line(MAX_FREQUENCIES * record_length)
        raise TouchstoneError(line, f"more than {MAX_FREQUENCIES} frequencies")
    return count


def _count_error(
    numbers: _Numbers, record_start: int, record_length: int, layout: list[int] | None
) -> TouchstoneError:
    """Name the line where the record beginning at token ``record_start`` goes wrong."""
    line_starts = numbers.line_starts
    first = int(np.searchsorted(line_starts, record_start))
    counts = np.diff(np.append(line_starts, numbers.values.size))
    if layout is not None:
        for offset, expected in enumerate(layout):
            if first + offset >= counts.size or counts[first + offset] != expected:
                at = min(first + offset, counts.size - 1)
                found = int(counts[at]) if first + offset < counts.size else 0
                return TouchstoneError(
                    numbers.line(line_starts[at]),
                    f"expected {expected} numbers on this line, found {found}",
                )
    return TouchstoneError(
        numbers.line(record_start),
        f"the frequency record starting here does not hold {record_length} numbers "
        f"(frequency + {record_length - 1})",
    )


def _check_increasing(numbers: _Numbers, frequencies: np.ndarray, record_length: int) -> None:
    bad = np.flatnonzero(np.diff(frequencies) <= 0)
    if bad.size:
        line = numbers.line((int(bad[0]) + 1) * record_length)
        raise TouchstoneError(line, "frequencies must increase from one record to the next")
    if frequencies.size and frequencies[0] < 0:
        raise TouchstoneError(numbers.line(0), "negative frequency")


def _to_complex(pairs: np.ndarray, data_format: DataFormat) -> np.ndarray:
    """(F, 2P) number pairs to (F, P) complex: RI a+jb; MA a*e^(jb deg); DB 10^(a/20)*e^(jb deg)."""
    first, second = pairs[:, 0::2], pairs[:, 1::2]
    if data_format == "RI":
        return first + 1j * second
    magnitude = first if data_format == "MA" else 10.0 ** (first / 20.0)
    return magnitude * np.exp(1j * np.deg2rad(second))


def _assemble(flat: np.ndarray, nports: int, matrix_format: MatrixFormat) -> np.ndarray:
    """(F, P) row-major entries to (F, N, N); Lower/Upper triangles are mirrored (symmetric)."""
    count = flat.shape[0]
    if matrix_format == "full":
        return flat.reshape(count, nports, nports)
    rows, cols = np.tril_indices(nports) if matrix_format == "lower" else np.triu_indices(nports)
    matrices = np.empty((count, nports, nports), dtype=complex)
    matrices[:, rows, cols] = flat
    matrices[:, cols, rows] = flat
    return matrices


def _result(
    frequency: np.ndarray,
    parameter: Parameter,
    matrices: np.ndarray,
    z0: np.ndarray,
    version: Version,
) -> TouchstoneData:
    arrays = [
        np.ascontiguousarray(frequency, dtype=float),
        np.ascontiguousarray(matrices, dtype=complex),
        np.ascontiguousarray(z0, dtype=float),
    ]
    for array in arrays:
        array.setflags(write=False)
    return TouchstoneData(
        frequency_hz=arrays[0],
        parameter=parameter,
        values=arrays[1],
        z0_ohm=arrays[2],
        version=version,
        nports=int(matrices.shape[1]),
    )


# ------------------------------------------------------------------------------ number scanner


def _scan_numbers(region: str, raw: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """Read every whitespace-separated number of ``region`` at once.

    ``raw`` is ``region`` as ASCII bytes (one byte per character). Returns (values, byte offset
    of each token, index of the first token that is not a number or -1). Grammar:
    ``[+-](digits[.digits] | .digits)[(e|E)[+-]digits]``. The mantissa digits are accumulated
    column by column over a (width, tokens) byte grid, then scaled by 10**exponent. Positions
    and counts are kept in 8-bit integers (a token is at most 64 bytes here; longer ones take
    the slow path) and big temporaries live in reused scratch buffers.
    """
    is_token = _scratch("edges", raw.size + 2).view(np.int8)
    is_token[0] = is_token[-1] = 0
    np.greater(raw, 32, out=is_token[1:-1].view(bool))
    changes = _scratch("changes", raw.size + 1).view(bool)
    edges = np.flatnonzero(np.not_equal(is_token[1:], is_token[:-1], out=changes))
    starts, ends = edges[0::2], edges[1::2]
    count = starts.size
    if count == 0:
        return np.empty(0), starts, -1
    i8, u8 = np.int8, np.uint8
    long_token = _scratch("long", count).view(bool)
    length = _scratch("length", count).view(i8)
    index = _scratch("index", 8 * count).view(np.int64)
    np.subtract(ends, starts, out=index)
    np.greater(index, _MAX_TOKEN_WIDTH, out=long_token)
    np.minimum(index, _MAX_TOKEN_WIDTH + 1, out=index)
    length[:] = index
    width = int(min(length.max(), _MAX_TOKEN_WIDTH))
    padded = _scratch("padded", raw.size + width)
    padded[: raw.size] = raw
    padded[raw.size :] = 0
    work = _scratch("grid", 8 * width * count).reshape(8, width, count)
    grid, digit_value, scratch, spare = work[0], work[1], work[2], work[3]
    is_digit, is_e, is_dot, is_sign = (work[i].view(bool) for i in range(4, 8))
    for j in range(width):  # byte j of every token, one row of the (width, tokens) grid
        np.add(starts, j, out=index)
        np.take(padded, index, out=grid[j])
    column = np.arange(1, width + 1, dtype=i8)[:, None]
    np.less_equal(column, length, out=is_e)
    grid *= is_e  # blank the bytes after each token
    np.subtract(grid, u8(48), out=digit_value)
    np.less(digit_value, u8(10), out=is_digit)
    np.bitwise_or(grid, u8(32), out=scratch)
    np.equal(scratch, u8(101), out=is_e)
    np.equal(grid, u8(46), out=is_dot)
    np.equal(grid, u8(43), out=is_sign)
    np.equal(grid, u8(45), out=spare.view(bool))
    is_sign |= spare.view(bool)
    known = spare.view(bool)
    np.logical_or(is_digit, is_e, out=known)
    known |= is_dot
    known |= is_sign
    np.not_equal(grid, u8(0), out=scratch.view(bool))
    bad = np.greater(scratch.view(bool), known, out=scratch.view(bool)).any(0)
    bad |= long_token
    n_e = is_e.view(i8).sum(0, dtype=i8)
    n_dot = is_dot.view(i8).sum(0, dtype=i8)
    n_sign = is_sign.view(i8).sum(0, dtype=i8)
    has_e = n_e > 0
    has_dot = n_dot > 0
    position = scratch.view(i8)
    np.multiply(is_e.view(i8), column, out=position)
    e_pos = np.where(has_e, position.max(0) - i8(1), length)  # index of 'e', else the length
    np.multiply(is_dot.view(i8), column, out=position)
    dot_pos = np.where(has_dot, position.max(0) - i8(1), e_pos)
    lead_sign = is_sign[0].copy()

    mantissa_end = min(int(e_pos.max()), width)
    in_mantissa = spare[:mantissa_end].view(bool)
    np.less_equal(column[:mantissa_end], e_pos, out=in_mantissa)
    in_mantissa &= is_digit[:mantissa_end]
    multiplier = np.multiply(in_mantissa.view(u8), u8(9), out=scratch[:mantissa_end])
    multiplier += u8(1)
    addend = np.multiply(digit_value[:mantissa_end], in_mantissa.view(u8), out=spare[:mantissa_end])
    values = np.zeros(count)
    for j in range(mantissa_end):
        np.multiply(values, multiplier[j], out=values)
        np.add(values, addend[j], out=values)

    bad |= n_e > 1
    bad |= n_dot > 1
    bad |= dot_pos > e_pos
    bad |= e_pos - lead_sign - has_dot < 1  # no mantissa digit
    exponent10 = np.where(has_dot, dot_pos + i8(1) - e_pos, i8(0)).astype(np.int16)
    exponent_sign = np.zeros(count, dtype=bool)
    with_e = np.flatnonzero(has_e)
    if with_e.size:
        exponent, signed, broken = _scan_exponents(grid, digit_value, is_digit, e_pos, with_e)
        exponent10[with_e] += exponent
        exponent_sign[with_e] = signed
        bad[with_e] |= broken
    bad |= n_sign != lead_sign.view(i8) + exponent_sign.view(i8)
    magnitude = np.abs(exponent10)
    bad |= magnitude > 308
    np.minimum(magnitude, 308, out=magnitude)
    scale = np.take(_POW10, magnitude, out=_scratch("scale", 8 * count).view(np.float64))
    negative_exponent = exponent10 < 0
    with np.errstate(over="ignore"):
        np.divide(values, scale, out=values, where=negative_exponent)
        np.multiply(values, scale, out=values, where=~negative_exponent)
    np.negative(values, out=values, where=grid[0] == 45)

    for k in np.flatnonzero(bad):
        token = region[starts[k] : ends[k]]
        if not _NUMBER.fullmatch(token):
            return values, starts, int(k)
        values[k] = float(token)
    return values, starts, -1


def _scan_exponents(
    grid: np.ndarray,
    digit_value: np.ndarray,
    is_digit: np.ndarray,
    e_pos: np.ndarray,
    with_e: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Signed exponent, 'has a sign after e' and 'malformed' for the tokens ``with_e``."""
    width, count = grid.shape
    if with_e.size == count:
        sub_grid, sub_value, sub_digit = grid, digit_value, is_digit
        after_e = e_pos.astype(np.int64) + 1
    else:
        sub_grid = grid[:, with_e]
        sub_value = digit_value[:, with_e]
        sub_digit = is_digit[:, with_e]
        after_e = e_pos[with_e].astype(np.int64) + 1
    columns = np.arange(with_e.size)
    char_after = sub_grid[np.minimum(after_e, width - 1), columns] * (after_e < width)
    signed = (char_after == 43) | (char_after == 45)
    first_digit = after_e + signed
    in_exponent = (np.arange(width)[:, None] >= first_digit) & (sub_grid != 0)
    n_digits = in_exponent.sum(0)
    broken = (n_digits < 1) | (n_digits > 4) | ~(sub_digit | ~in_exponent).all(0)
    exponent = np.zeros(with_e.size, dtype=np.int16)
    for j in range(int(first_digit.min()), width):
        exponent = np.where(in_exponent[j], exponent * 10 + sub_value[j], exponent)
    exponent = np.where(char_after == 45, -exponent, exponent)
    return exponent, signed, broken
