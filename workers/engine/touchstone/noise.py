"""Noise parameters of two-port files: read past and dropped, but each record is checked.

A noise record is one line of five numbers: frequency, minimum noise figure (dB), magnitude and
angle (degrees) of the source reflection coefficient that gives it, and the effective noise
resistance; frequencies increase. In Version 1.0 the block begins at the first frequency not
above the one before; in Version 2.0 it follows [Noise Data] and holds
[Number of Noise Frequencies] records (TS2 "[Noise Data]"; the column list is from memory of
the specification, not checked against the PDF).
"""

from __future__ import annotations

import numpy as np

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone.text import Numbers

NOISE_RECORD = 5
_COLUMNS = "frequency, minimum noise figure in dB, |Γopt|, angle of Γopt in degrees, Rn"


def check_noise_lines(numbers: Numbers, start: int, declared: int | None) -> None:
    """Tokens from ``start`` on are noise records: five numbers per line, frequencies rising,
    and ``declared`` records when the file declares their number (Version 2.0)."""
    tokens = np.arange(start, numbers.values.size)
    if tokens.size == 0:
        return
    line = numbers.line_of(tokens)
    firsts = np.flatnonzero(np.concatenate(([True], line[1:] != line[:-1])))
    counts = np.diff(np.append(firsts, tokens.size))
    wrong = np.flatnonzero(counts != NOISE_RECORD)
    hint = "" if declared is not None else (
        "; in a Version 1.0 two-port file the first frequency not above the one before starts "
        "the noise data")
    if wrong.size:
        k = int(wrong[0])
        raise TouchstoneError(
            int(line[firsts[k]]),
            f"a noise record needs {NOISE_RECORD} numbers ({_COLUMNS}), found {int(counts[k])}"
            + hint,
        )
    frequencies = numbers.values[start::NOISE_RECORD]
    falling = np.flatnonzero(np.diff(frequencies) <= 0)
    if falling.size:
        raise TouchstoneError(int(line[firsts[falling[0] + 1]]),
                              "noise frequencies must increase from one record to the next")
    if declared is not None and firsts.size != declared:
        raise TouchstoneError(
            int(line[firsts[min(declared, firsts.size - 1)]]),
            f"[Number of Noise Frequencies] is {declared} but [Noise Data] holds {firsts.size} "
            "records",
        )
