"""Network records: counting and checking them, and turning number pairs into matrices."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone.options import DataFormat, Parameter
from workers.engine.touchstone.text import Numbers, Version

MatrixFormat = Literal["full", "lower", "upper"]

MAX_FREQUENCIES = 100_000


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



def count_records(
    numbers: Numbers, record_length: int, *, noise_may_follow: bool, layout: list[int] | None
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
            raise count_error(numbers, int(starts[-1]), record_length, layout)
        count = starts.size
    else:
        k = int(trouble[0])
        line = numbers.line(starts[k])
        if not aligned[k]:
            raise count_error(numbers, int(starts[k - 1]), record_length, layout)
        if frequencies[k] < 0:
            raise TouchstoneError(line, "negative frequency")
        if not noise_may_follow:
            raise TouchstoneError(line, "frequencies must increase from one record to the next")
        count = k
    if count > MAX_FREQUENCIES:
        line = numbers.line(MAX_FREQUENCIES * record_length)
        raise TouchstoneError(line, f"more than {MAX_FREQUENCIES} frequencies")
    return count


def count_error(
    numbers: Numbers, record_start: int, record_length: int, layout: list[int] | None
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


def check_increasing(numbers: Numbers, frequencies: np.ndarray, record_length: int) -> None:
    bad = np.flatnonzero(np.diff(frequencies) <= 0)
    if bad.size:
        line = numbers.line((int(bad[0]) + 1) * record_length)
        raise TouchstoneError(line, "frequencies must increase from one record to the next")
    if frequencies.size and frequencies[0] < 0:
        raise TouchstoneError(numbers.line(0), "negative frequency")


def to_complex(pairs: np.ndarray, data_format: DataFormat) -> np.ndarray:
    """(F, 2P) number pairs to (F, P) complex: RI a+jb; MA a*e^(jb deg); DB 10^(a/20)*e^(jb deg)."""
    first, second = pairs[:, 0::2], pairs[:, 1::2]
    if data_format == "RI":
        return first + 1j * second
    magnitude = first if data_format == "MA" else 10.0 ** (first / 20.0)
    return magnitude * np.exp(1j * np.deg2rad(second))


def assemble(flat: np.ndarray, nports: int, matrix_format: MatrixFormat) -> np.ndarray:
    """(F, P) row-major entries to (F, N, N); Lower/Upper triangles are mirrored (symmetric)."""
    count = flat.shape[0]
    if matrix_format == "full":
        return flat.reshape(count, nports, nports)
    rows, cols = np.tril_indices(nports) if matrix_format == "lower" else np.triu_indices(nports)
    matrices = np.empty((count, nports, nports), dtype=complex)
    matrices[:, rows, cols] = flat
    matrices[:, cols, rows] = flat
    return matrices


def result(
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

