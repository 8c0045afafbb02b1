"""Network records: counting and checking them, and turning number pairs into matrices."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone.options import DataFormat, Parameter
from workers.engine.touchstone.text import Numbers, Version

MatrixFormat = Literal["full", "lower", "upper"]

MAX_FREQUENCIES = 100_000


NoteCode = Literal["touchstone_comment_references"]


@dataclass(frozen=True)
class TouchstoneNote:
    """Something the reader assumed or noticed that a user should hear about (not an error)."""

    code: NoteCode
    severity: Literal["info", "warning"]
    message: str
    details: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True, eq=False)
class TouchstoneData:
    """One parsed Touchstone file; arrays are read-only.

    ``values`` is (F, N, N) complex, de-normalised: S as given, Y in siemens, Z in ohms.
    ``z0_ohm`` is the reference resistance of each port (N,). ``notes`` say what the reader
    assumed or noticed beyond the file's rules (e.g. references named only in comments).
    """

    frequency_hz: np.ndarray
    parameter: Parameter
    values: np.ndarray
    z0_ohm: np.ndarray
    version: Version
    nports: int
    notes: tuple[TouchstoneNote, ...] = ()



def count_records(
    numbers: Numbers, record_length: int, *, noise_may_follow: bool, layouts: list[list[int]]
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
            raise count_error(numbers, int(starts[-1]), record_length, layouts)
        count = starts.size
    else:
        k = int(trouble[0])
        line = numbers.line(starts[k])
        if not aligned[k]:
            raise count_error(numbers, int(starts[k - 1]), record_length, layouts)
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
    numbers: Numbers, record_start: int, record_length: int, layouts: list[list[int]]
) -> TouchstoneError:
    """Name the line where the record beginning at token ``record_start`` goes wrong.

    ``layouts`` are the numbers per line a record may have (frequency line first); the first
    record's own layout is tried too when the faulty record is a later one. The layout that
    matches the most lines from the record's start names the first line that departs from it:
    the continuation line at fault, not the record's first line.
    """
    line_starts = numbers.line_starts
    first = int(np.searchsorted(line_starts, record_start))
    counts = np.diff(np.append(line_starts, numbers.values.size))
    candidates = list(layouts)
    if first > 0:
        cumulative = np.cumsum(counts[:first])
        if record_length in cumulative:
            candidates.insert(0, counts[: int(np.searchsorted(cumulative, record_length)) + 1])
    best: tuple[int, int] | None = None  # (lines matched, expected count on the next line)
    for layout in candidates:
        matched = 0
        while (matched < len(layout) and first + matched < counts.size
               and counts[first + matched] == layout[matched]):
            matched += 1
        if matched < len(layout) and (best is None or matched > best[0]):
            best = (matched, int(layout[matched]))
    if best is not None:
        at = first + best[0]
        if at < counts.size:
            where = f" (line {best[0] + 1} of the record that starts on line " \
                f"{numbers.line(line_starts[first])})" if best[0] else ""
            return TouchstoneError(
                numbers.line(line_starts[at]),
                f"expected {best[1]} numbers on this line{where}, found {int(counts[at])}",
            )
    return TouchstoneError(
        numbers.line(record_start),
        f"the frequency record starting here does not hold {record_length} numbers "
        f"(frequency + {record_length - 1})",
    )


def row_layouts(row_pairs: list[int], wrap_pairs: int | None) -> list[int]:
    """Numbers per line of one record whose matrix rows hold ``row_pairs`` pairs, each row
    starting a new line and wrapped after ``wrap_pairs`` pairs (None: never); frequency first."""
    layout: list[int] = []
    for pairs in row_pairs:
        step = wrap_pairs or pairs
        layout.extend(2 * min(step, pairs - k) for k in range(0, pairs, step))
    layout[0] += 1
    return layout


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

