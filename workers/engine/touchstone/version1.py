"""Version 1.0 files (.sNp): the option line, then frequency records (TS2 rules for 1.0)."""

from __future__ import annotations

import math

import numpy as np

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone.options import check_ports, parse_option_line, port_references
from workers.engine.touchstone.records import (
    TouchstoneData,
    assemble,
    count_records,
    result,
    to_complex,
)
from workers.engine.touchstone.text import Numbers, Text, read_numbers


def parse_version1(lines: Text, first: int, nports: int | None) -> TouchstoneData:
    option_line = lines[first].strip()
    if not option_line.startswith("#"):
        raise TouchstoneError(
            first + 1, "the option line ('# <unit> <parameter> <format> R <n>') must come first"
        )
    options = parse_option_line(option_line, first + 1)
    numbers = read_numbers(lines, first + 1, len(lines), version="1.0")
    if numbers.values.size == 0:
        raise TouchstoneError(first + 1, "no network data after the option line")
    if nports is None:
        nports = _infer_ports(numbers)
    check_ports(nports, numbers.line(0))
    record_length = 1 + 2 * nports * nports
    count = count_records(
        numbers, record_length, noise_may_follow=nports == 2, layout=_v1_layout(nports)
    )
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


def _infer_ports(numbers: Numbers) -> int:
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

