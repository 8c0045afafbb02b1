"""Write a batch's report into a folder: ``index.html`` (the batch page), ``checks/<id>.html``,
and the margin across the variants (``margin.html``, ``margin-by-label.html``, ``margin.csv``).

Plots need each check's request (the curves are recomputed from it, ``data.figure_data``); the
command line has them because it submitted them. Drawing costs about a second per plot, so by
default only checks that are not stable get pictures.
"""

from __future__ import annotations

import logging
import multiprocessing
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from service.reports.outcomes import state_of
from service.reports.pages import batch_page, check_page

PlotChoice = Literal["not-stable", "all", "none"]
PLOT_CHOICES: tuple[str, ...] = ("not-stable", "all", "none")
log = logging.getLogger("ballast.reports")


@dataclass(frozen=True)
class CheckPictures:
    """The rendered plots of one check and, from the same analysis, why null device counts are
    null (for the page's device table)."""

    images: dict[str, bytes | None]
    device_notes: dict[str, str] = field(default_factory=dict)


def check_plots(payload: Mapping[str, Any], verdict: Mapping[str, Any],
                fmt: Literal["svg", "png"] = "svg") -> CheckPictures:
    """Every plot of one check, rendered (matplotlib is imported here, on first use)."""
    from service.reports.data import figure_data
    from service.reports.plots import plot_names, render_plot

    data = figure_data(dict(payload), dict(verdict))
    return CheckPictures({name: render_plot(name, data, fmt) for name in plot_names(data)},
                         data.device_notes())


def notes_without_plots(payload: Mapping[str, Any] | None,
                        verdict: Mapping[str, Any] | None) -> dict[str, str]:
    """Why null device counts are null, for a page drawn without plots (cheap: no refinement)."""
    from service.reports.data import request_device_notes
    from service.reports.devices import needs_notes

    if payload is None or not verdict or not needs_notes(verdict):
        return {}
    try:
        return request_device_notes(dict(payload), dict(verdict))
    except Exception as exc:  # the page still says that the verdict gives no reason
        log.warning("device notes failed: %s", exc)
        return {}


def wants_plots(choice: PlotChoice, item: Mapping[str, Any]) -> bool:
    state = state_of(item)
    if choice == "none" or item.get("status") != "done":
        return False
    return choice == "all" or state != "stable"


def check_href(item: Mapping[str, Any]) -> str:
    return f"checks/{item['id']}.html"


def render_many(jobs: Sequence[tuple[str, Mapping[str, Any], Mapping[str, Any]]],
                processes: int = 1) -> dict[str, CheckPictures | Exception]:
    """Plots of several checks: ``jobs`` are (check id, request, verdict). With ``processes`` > 1
    they are drawn in that many spawned processes (matplotlib is not thread-safe)."""
    results: dict[str, CheckPictures | Exception] = {}
    if processes <= 1 or len(jobs) <= 1:
        for check_id, payload, verdict in jobs:
            try:
                results[check_id] = check_plots(payload, verdict)
            except Exception as exc:  # a page without pictures beats no page
                results[check_id] = exc
        return results
    context = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=min(processes, len(jobs)), mp_context=context) as pool:
        futures = {check_id: pool.submit(check_plots, dict(payload), dict(verdict))
                   for check_id, payload, verdict in jobs}
        for check_id, future in futures.items():
            try:
                results[check_id] = future.result()
            except Exception as exc:
                results[check_id] = exc
    return results


def write_batch_report(folder: Path, batch: Mapping[str, Any], items: Sequence[Mapping[str, Any]],
                       checks: Mapping[str, Mapping[str, Any]],
                       payloads: Mapping[str, Mapping[str, Any]],
                       plots: PlotChoice = "not-stable",
                       on_check: Callable[[int, int], None] | None = None,
                       processes: int = 1) -> Path:
    """Write the pages; return the path of ``index.html``. ``checks`` maps ids to full check JSON
    (items without one get a page from their listing row), ``payloads`` ids to check requests;
    ``processes`` > 1 draws the plots in parallel."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "checks").mkdir(exist_ok=True)
    jobs = []
    for item in items:
        check = checks.get(str(item["id"]))
        payload = payloads.get(str(item["id"]))
        if wants_plots(plots, item) and payload is not None and check and check.get("verdict"):
            jobs.append((str(item["id"]), payload, check["verdict"]))
    drawn = render_many(jobs, processes)
    for n, item in enumerate(items, start=1):
        check = checks.get(str(item["id"])) or {**item, "verdict": None}
        images: dict[str, bytes | None] = {}
        notes: dict[str, str] = {}
        note = None
        result = drawn.get(str(item["id"]))
        if isinstance(result, CheckPictures):
            images, notes = result.images, result.device_notes
        else:
            if isinstance(result, Exception):
                log.warning("plots of %s failed: %s", item["id"], result)
                note = f"The plots could not be drawn: {result}"
            elif plots == "not-stable" and state_of(item) == "stable":
                note = "Stable: no pictures drawn (ask for them with --plots all)."
            notes = notes_without_plots(payloads.get(str(item["id"])), check.get("verdict"))
        page = check_page(check, images, batch_href="../index.html", plots_note=note,
                          device_notes=notes)
        (folder / check_href(item)).write_text(page, encoding="utf-8")
        if on_check:
            on_check(n, len(items))
    verdicts = {key: c["verdict"] for key, c in checks.items() if c and c.get("verdict")}
    trend_href = write_trend(folder, batch, items, verdicts, draw=plots != "none")
    index = folder / "index.html"
    index.write_text(batch_page(batch, list(items), check_href, verdicts, trend_href),
                     encoding="utf-8")
    return index


TREND_FILES = {"submission": "margin.html", "label": "margin-by-label.html"}
TREND_CSV = "margin.csv"


def write_trend(folder: Path, batch: Mapping[str, Any], items: Sequence[Mapping[str, Any]],
                verdicts: Mapping[str, Mapping[str, Any]], draw: bool = True) -> str | None:
    """``margin.csv`` (submission order) and, when ``draw``, the margin pages in both orders;
    returns the link to the first page (None without pages)."""
    from service.reports.trend import trend_csv, trend_rows

    (folder / TREND_CSV).write_text(trend_csv(trend_rows(items, verdicts)), encoding="utf-8")
    if not draw:
        return None
    from service.reports.pages import trend_page
    from service.reports.plot_trend import trend_figure
    from service.reports.plots import render

    for order, name in TREND_FILES.items():
        rows = trend_rows(items, verdicts, order)  # type: ignore[arg-type]
        other = TREND_FILES["label" if order == "submission" else "submission"]
        page = trend_page(batch, rows, render(trend_figure(rows), "svg"), order, other,
                          TREND_CSV, "index.html")
        (folder / name).write_text(page, encoding="utf-8")
    return TREND_FILES["submission"]
