"""Version 1.0 files (.sNp): the option line, then frequency records (TS2 rules for 1.0)."""

from __future__ import annotations

import math

import numpy as np

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone.noise import check_noise_lines
from workers.engine.touchstone.options import (
    MAX_PORTS,
    check_ports,
    parse_option_line,
    port_references,
)
from workers.engine.touchstone.records import (
    TouchstoneData,
    assemble,
    count_records,
    result,
    row_layouts,
    to_complex,
)
from workers.engine.touchstone.text import Numbers, Text, read_numbers


def parse_version1(lines: Text, first: int, named: tuple[str, int] | None) -> TouchstoneData:
    """A Version 1.0 file; ``named`` is (file name, port count) when the name ends in .sNp."""
    option_line = lines[first].strip()
    if not option_line.startswith("#"):
        raise TouchstoneError(
            first + 1, "the option line ('# <unit> <parameter> <format> R <n>') must come first"
        )
    options = parse_option_line(option_line, first + 1)
    numbers = read_numbers(lines, first + 1, len(lines), version="1.0")
    if numbers.values.size == 0:
        raise TouchstoneError(first + 1, "no network data after the option line")
    nports = _port_count(numbers, named)
    check_ports(nports, numbers.line(0))
    record_length = 1 + 2 * nports * nports
    count = count_records(
        numbers, record_length, noise_may_follow=nports == 2, layouts=[_v1_layout(nports)]
    )
    if count * record_length < numbers.values.size:  # the two-port noise block (see noise.py)
        check_noise_lines(numbers, count * record_length, None)
    records = numbers.values[: count * record_length].reshape(count, record_length)
    matrices = assemble(to_complex(records[:, 1:], options.data_format), nports, "full")
    if nports == 2:  # TS2 "1-port and 2-port Networks": Version 1.0 order is N11 N21 N12 N22
        matrices = matrices.transpose(0, 2, 1)
    z0 = port_references(options.resistance, nports, first + 1)
    if options.parameter != "S":
        if np.ptp(z0) != 0.0:
            raise TouchstoneError(
                first + 1, "Y and Z data with a different R per port are not supported"
            )
        # Version 1.0 data are normalised to R: z = Z/R and y = Y*R (see module docstring).
        matrices = matrices * z0[0] if options.parameter == "Z" else matrices / z0[0]
    return result(records[:, 0] * options.unit_hz, options.parameter, matrices, z0, "1.0")


def _port_count(numbers: Numbers, named: tuple[str, int] | None) -> int:
    """N from the data; a file name's .sNp that names another count is an error.

    When the data alone do not tell (their first line is malformed), the file name's count is
    taken and the record checks then name the faulty line.
    """
    if named is None:
        return _infer_ports(numbers)
    filename, nports = named
    try:
        inferred = _infer_ports(numbers)
    except TouchstoneError:
        return nports
    if inferred != nports:
        raise TouchstoneError(
            numbers.line(0),
            f"the file name {filename!r} says {nports} ports (.s{nports}p) but the data hold "
            f"{inferred}-port records ({2 * inferred * inferred} numbers after each frequency); "
            f"rename the file .s{inferred}p or check the data",
        )
    return nports


def _infer_ports(numbers: Numbers) -> int:
    """N from the first record: it runs from the first line to the next line with an odd count.

    A record's first line holds the frequency and whole pairs (odd count); continuation lines hold
    whole pairs only (even count). Only the tokens that can belong to the first record (and the
    first token after it) are looked at.
    """
    prefix = min(numbers.values.size, 2 * MAX_PORTS * MAX_PORTS + 2)
    line = numbers.line_of(np.arange(prefix))
    starts = np.flatnonzero(np.concatenate(([True], line[1:] != line[:-1])))
    counts = np.diff(np.append(starts, prefix))
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
    """Numbers per line of one Version 1.0 record: one line for 1 and 2 ports; else each row on
    new lines, at most four pairs per line (TS2 "3-port and 4-port", "5-port and above")."""
    if nports <= 2:
        return row_layouts([nports * nports], None)
    return row_layouts([nports] * nports, 4)
