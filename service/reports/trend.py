"""The margin of every check of a batch in one table: each variant's least-damped natural
frequency (ζ, frequency, σ) and closest |NDF|, in submission order or by label (no plotting).

A designer sweeping a part across variants reads the trend: ζ falling towards 0 is a variant
drifting towards oscillation, a negative ζ one that oscillates. Labels sort naturally, numbers
in them by value ("R=22" before "R=100").
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

from service.reports.outcomes import state_of

TrendOrder = Literal["submission", "label"]
TREND_ORDERS: tuple[str, ...] = ("submission", "label")
TREND_COLUMNS = ("position", "id", "label", "verdict", "least_damping_ratio",
                 "least_damped_frequency_hz", "least_damped_growth_rate_per_s",
                 "target_damping_ratio", "min_abs_ndf", "min_abs_ndf_frequency_hz")


@dataclass(frozen=True)
class TrendRow:
    """One variant: its place in the batch (from 1), state and margin figures (None: none)."""

    position: int
    id: str
    label: str
    state: str
    damping_ratio: float | None
    frequency_hz: float | None
    growth_rate_per_s: float | None
    target_damping_ratio: float | None
    min_abs_ndf: float | None
    min_abs_ndf_frequency_hz: float | None


def _number(value: Any) -> float | None:
    return float(value) if isinstance(value, int | float) and not isinstance(value, bool) \
        else None


def least_damped(verdict: Mapping[str, Any] | None) -> Mapping[str, Any] | None:
    """The verdict's least-damped natural frequency (``margin.least_damped[0]``), if any."""
    margin = (verdict or {}).get("margin")
    if not isinstance(margin, Mapping):
        return None
    entries = [e for e in margin.get("least_damped") or [] if isinstance(e, Mapping)]
    return entries[0] if entries else None


def natural_key(label: str) -> tuple:
    """Sort key that compares the numbers inside labels by value (case-insensitive text)."""
    parts = re.split(r"(\d+(?:\.\d+)?)", label.casefold())
    return tuple((0, float(p), "") if i % 2 else (1, 0.0, p) for i, p in enumerate(parts))


def trend_rows(items: Sequence[Mapping[str, Any]], verdicts: Mapping[str, Mapping[str, Any]],
               order: TrendOrder = "submission") -> list[TrendRow]:
    """One row per listing item (submission order as given), its verdict from ``verdicts``
    (id → verdict JSON; checks without one have no figures); sorted by label when asked."""
    rows = []
    for position, item in enumerate(items, start=1):
        verdict = verdicts.get(str(item.get("id"))) or item.get("verdict")
        verdict = verdict if isinstance(verdict, Mapping) else None
        entry = least_damped(verdict) or {}
        margin = (verdict or {}).get("margin") or {}
        closest = margin.get("min_abs_ndf") if isinstance(margin, Mapping) else None
        closest = closest if isinstance(closest, Mapping) else {}
        rows.append(TrendRow(
            position, str(item.get("id")), str(item.get("label") or item.get("id")),
            state_of({**item, "verdict": verdict}) if verdict else state_of(item),
            _number(entry.get("damping_ratio")),
            _number(entry.get("frequency_hz")), _number(entry.get("growth_rate_per_s")),
            _number(margin.get("target_damping_ratio")) if isinstance(margin, Mapping) else None,
            _number(closest.get("value")), _number(closest.get("frequency_hz"))))
    if order == "label":
        rows.sort(key=lambda r: (natural_key(r.label), r.position))
    return rows


def trend_csv(rows: Sequence[TrendRow]) -> str:
    """RFC 4180 CSV (the csv module) of ``rows``: ``TREND_COLUMNS``, empty where unknown."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerow(TREND_COLUMNS)
    for r in rows:
        values = (r.position, r.id, r.label, r.state, r.damping_ratio, r.frequency_hz,
                  r.growth_rate_per_s, r.target_damping_ratio, r.min_abs_ndf,
                  r.min_abs_ndf_frequency_hz)
        writer.writerow(["" if v is None else repr(v) if isinstance(v, float) else v
                         for v in values])
    return buffer.getvalue()
