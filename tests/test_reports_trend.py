"""service.reports.trend and plot_trend: the margin of a batch's variants as rows, CSV and SVG.

Oracles: Python's csv module reading the CSV back (RFC 4180); natural sort order, numbers in
labels compared by value (common practice: "R=22" before "R=100"); the SVG read back with
xml.etree (the plot's element ids).
"""

from __future__ import annotations

import csv
import io
import xml.etree.ElementTree as ET

from service.reports.plot_trend import trend_figure
from service.reports.plots import render
from service.reports.trend import TREND_COLUMNS, natural_key, trend_csv, trend_rows


def _verdict(zeta: float, f: float) -> dict:
    return {"verdict": "stable" if zeta > 0 else "unstable", "margin": {
        "least_damped": [{"damping_ratio": zeta, "frequency_hz": f, "growth_rate_per_s": -1.0}],
        "min_abs_ndf": {"value": 0.5, "frequency_hz": f, "device": "Q1"},
        "target_damping_ratio": 0.05}}


ITEMS = [{"id": "chk_a", "label": "R=100", "status": "done"},
         {"id": "chk_b", "label": "R=22", "status": "done"},
         {"id": "chk_c", "label": "R=4.7", "status": "done"},
         {"id": "chk_d", "label": "r=none", "status": "failed"}]
VERDICTS = {"chk_a": _verdict(0.2, 1e8), "chk_b": _verdict(0.04, 1.4e8),
            "chk_c": _verdict(-0.02, 1.45e8)}


def test_labels_sort_naturally_and_submission_order_is_kept():
    assert sorted(["R=100", "R=22", "r=4.7", "R=none"], key=natural_key) == \
        ["r=4.7", "R=22", "R=100", "R=none"]
    assert [r.label for r in trend_rows(ITEMS, VERDICTS)] == ["R=100", "R=22", "R=4.7", "r=none"]
    by_label = trend_rows(ITEMS, VERDICTS, "label")
    assert [r.label for r in by_label] == ["R=4.7", "R=22", "R=100", "r=none"]
    assert [r.position for r in by_label] == [3, 2, 1, 4]


def test_csv_has_the_documented_columns_and_empty_cells_where_unknown():
    rows = list(csv.DictReader(io.StringIO(trend_csv(trend_rows(ITEMS, VERDICTS)))))
    assert list(rows[0]) == list(TREND_COLUMNS)
    assert float(rows[2]["least_damping_ratio"]) == -0.02
    assert rows[2]["verdict"] == "unstable" and rows[3]["verdict"] == "failed"
    assert rows[3]["least_damping_ratio"] == "" and rows[3]["min_abs_ndf"] == ""
    assert float(rows[0]["target_damping_ratio"]) == 0.05


def test_figure_marks_the_variants_and_the_target():
    svg = render(trend_figure(trend_rows(ITEMS, VERDICTS)), "svg")
    ids = {e.get("id") for e in ET.fromstring(svg).iter() if e.get("id")}
    assert {"trend-zeta", "trend-frequency", "trend-target"} <= ids
    assert b"R=4.7" in svg and b"target" in svg
