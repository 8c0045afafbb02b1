"""Version 2.0 files: keywords from [Version] to [End] (TS2 keyword sections)."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone.noise import check_noise_lines
from workers.engine.touchstone.numbers import NUMBER
from workers.engine.touchstone.options import (
    Options,
    check_ports,
    parse_option_line,
    port_references,
)
from workers.engine.touchstone.records import (
    MAX_FREQUENCIES,
    MatrixFormat,
    TouchstoneData,
    assemble,
    check_increasing,
    count_records,
    result,
    row_layouts,
    to_complex,
)
from workers.engine.touchstone.text import Numbers, Text, read_numbers

_KEYWORD = re.compile(r"\[([^\]]*)\](.*)\Z")
_MISSING_END = "missing [End]: add [End] on a line of its own after the last data"


@dataclass
class _Header2:
    options: Options | None = None
    nports: int | None = None
    two_port_order: str | None = None
    frequencies: int | None = None
    noise_frequencies: int | None = None
    reference: list[float] | None = None
    reference_line: int = 0
    matrix_format: MatrixFormat = "full"
    seen: dict[str, int] | None = None


def parse_version2(lines: Text, first: int) -> TouchstoneData:
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
    numbers = read_numbers(lines, index + 1, stop, version="2.0")
    pairs = _pairs_per_record(header.nports, header.matrix_format)
    record_length = 1 + 2 * pairs
    _check_record_count(numbers, record_length, header.frequencies, stop + 1, lines,
                        header.nports, header.matrix_format)
    records = numbers.values.reshape(header.frequencies, record_length)
    check_increasing(numbers, records[:, 0], record_length)
    _read_tail2(lines, stop, header)
    matrices = assemble(
        to_complex(records[:, 1:], header.options.data_format), header.nports, header.matrix_format
    )
    if header.nports == 2 and header.matrix_format == "full" and header.two_port_order == "21_12":
        matrices = matrices.transpose(0, 2, 1)
    if header.reference is not None:
        z0 = np.array(header.reference)
    else:
        z0 = port_references(header.options.resistance, header.nports, header.seen["option"])
    # TS2: Version 2.0 Y and Z data are not normalised; they are taken as siemens and ohms.
    frequency = records[:, 0] * header.options.unit_hz
    return result(frequency, header.options.parameter, matrices, z0, "2.0")


def _read_header2(lines: Text, start: int, header: _Header2) -> int:
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
            header.options = parse_option_line(line, number)
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
        check_ports(header.nports, number)
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


def _read_tail2(lines: Text, stop: int, header: _Header2) -> None:
    """After the network data: optional [Noise Data] (checked, dropped), then [End] and nothing
    else."""
    if stop >= len(lines):
        raise TouchstoneError(lines.last_content_line(), _MISSING_END)
    keyword, argument = _keyword(lines[stop], stop + 1)
    if keyword == "noise data":
        if header.noise_frequencies is None:
            raise TouchstoneError(stop + 1, "[Noise Data] without [Number of Noise Frequencies]")
        end = lines.next_keyword_line(stop + 1)
        noise = read_numbers(lines, stop + 1, end, version="2.0")
        if noise.values.size == 0:
            raise TouchstoneError(stop + 1, "[Noise Data] holds no noise records")
        check_noise_lines(noise, 0, header.noise_frequencies)
        stop = end
        if stop >= len(lines):
            raise TouchstoneError(lines.last_content_line(), _MISSING_END)
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
        if not NUMBER.fullmatch(word) or not 0.0 < float(word) < math.inf:
            raise TouchstoneError(
                number, f"[Reference] value {word!r} is not a finite positive number")
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


def _layouts2(nports: int, matrix_format: MatrixFormat) -> list[list[int]]:
    """Line layouts a Version 2.0 record may have: each matrix row on one line, or rows wrapped
    at four pairs as in Version 1.0 (the rows of Lower and Upper shrink: TS2 "[Matrix Format]")."""
    if matrix_format == "full":
        rows = [nports] * nports
    elif matrix_format == "lower":
        rows = list(range(1, nports + 1))
    else:
        rows = list(range(nports, 0, -1))
    return [row_layouts(rows, None), row_layouts(rows, 4), row_layouts([sum(rows)], None)]


def _check_record_count(
    numbers: Numbers, record_length: int, declared: int, end_line: int, lines: Text,
    nports: int, matrix_format: MatrixFormat,
) -> None:
    """Version 2.0: the network data must hold exactly [Number of Frequencies] records."""
    total = numbers.values.size
    if total == declared * record_length:
        return
    if total == 0:
        raise TouchstoneError(end_line, "no network data")
    full = count_records(numbers, record_length, noise_may_follow=False,
                         layouts=_layouts2(nports, matrix_format))
    if full > declared:
        line = numbers.line(declared * record_length)
        raise TouchstoneError(line, f"more frequencies than [Number of Frequencies] {declared}")
    raise TouchstoneError(
        min(end_line, lines.last_content_line()),
        f"[Number of Frequencies] is {declared} but the network data holds {full}",
    )

