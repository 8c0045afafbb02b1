"""Results as a terminal table or CSV (RFC 4180, via the csv module)."""

from __future__ import annotations

import csv
import io
from collections.abc import Mapping, Sequence
from typing import Any

from service.reports.outcomes import state_of
from service.reports.units import format_hz

CSV_COLUMNS = ("id", "label", "status", "verdict", "unstable_count",
               "first_unstable_frequency_hz", "first_unstable_node")

_ANSI = {"unstable": "\033[1;31m", "indeterminate": "\033[33m", "failed": "\033[35m",
         "cancelled": "\033[2m", "stable": "\033[32m"}
_RESET = "\033[0m"


def results_csv(items: Sequence[Mapping[str, Any]]) -> str:
    """One row per check, frequencies in Hz as plain numbers, empty cells for missing values."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerow(CSV_COLUMNS)
    for item in items:
        writer.writerow(["" if item.get(c) is None else item.get(c) for c in CSV_COLUMNS])
    return buffer.getvalue()


def results_table(items: Sequence[Mapping[str, Any]], colour: bool = False) -> str:
    """A fixed-width table for a terminal; verdict words coloured when ``colour``."""
    header = ("variant", "verdict", "unstable", "first frequency", "node")
    rows = []
    for item in items:
        count = item.get("unstable_count")
        rows.append((str(item.get("label") or item.get("id")), state_of(item),
                     "–" if count is None else str(count),
                     format_hz(item.get("first_unstable_frequency_hz")),
                     str(item.get("first_unstable_node") or "–")))
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(header)]
    lines = ["  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True)).rstrip(),
             "  ".join("─" * w for w in widths)]
    for row in rows:
        cells = [c.rjust(w) if i in (2, 3) else c.ljust(w)
                 for i, (c, w) in enumerate(zip(row, widths, strict=True))]
        if colour and row[1] in _ANSI:
            cells[1] = _ANSI[row[1]] + cells[1] + _RESET
        lines.append("  ".join(cells).rstrip())
    return "\n".join(lines) + "\n"
