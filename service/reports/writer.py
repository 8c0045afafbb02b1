"""Write a batch's report into a folder: ``index.html`` (the batch page) and ``checks/<id>.html``.

Plots need each check's request (the curves are recomputed from it, ``data.figure_data``); the
command line has them because it submitted them. Drawing costs about a second per plot, so by
default only checks that are not stable get pictures.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any, Literal

from service.reports.outcomes import state_of
from service.reports.pages import batch_page, check_page

PlotChoice = Literal["not-stable", "all", "none"]
PLOT_CHOICES: tuple[str, ...] = ("not-stable", "all", "none")
log = logging.getLogger("ballast.reports")


def check_plots(payload: Mapping[str, Any], verdict: Mapping[str, Any],
                fmt: Literal["svg", "png"] = "svg") -> dict[str, bytes | None]:
    """Every plot of one check, rendered (matplotlib is imported here, on first use)."""
    from service.reports.data import figure_data
    from service.reports.plots import PLOT_NAMES, render_plot

    data = figure_data(dict(payload), dict(verdict))
    return {name: render_plot(name, data, fmt) for name in PLOT_NAMES}


def wants_plots(choice: PlotChoice, item: Mapping[str, Any]) -> bool:
    state = state_of(item)
    if choice == "none" or item.get("status") != "done":
        return False
    return choice == "all" or state != "stable"


def check_href(item: Mapping[str, Any]) -> str:
    return f"checks/{item['id']}.html"


def write_batch_report(folder: Path, batch: Mapping[str, Any], items: Sequence[Mapping[str, Any]],
                       checks: Mapping[str, Mapping[str, Any]],
                       payloads: Mapping[str, Mapping[str, Any]],
                       plots: PlotChoice = "not-stable",
                       on_check: Callable[[int, int], None] | None = None) -> Path:
    """Write the pages; return the path of ``index.html``. ``checks`` maps ids to full check JSON
    (items without one get a page from their listing row), ``payloads`` ids to check requests."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "checks").mkdir(exist_ok=True)
    for n, item in enumerate(items, start=1):
        check = checks.get(str(item["id"])) or {**item, "verdict": None}
        images: dict[str, bytes | None] = {}
        note = None
        payload = payloads.get(str(item["id"]))
        if wants_plots(plots, item) and payload is not None and check.get("verdict"):
            try:
                images = check_plots(payload, check["verdict"])
            except Exception as exc:  # a page without pictures beats no page
                log.warning("plots of %s failed: %s", item["id"], exc)
                note = f"The plots could not be drawn: {exc}"
        elif plots == "not-stable" and state_of(item) == "stable":
            note = "Stable: no pictures drawn (ask for them with --plots all)."
        page = check_page(check, images, batch_href="../index.html", plots_note=note)
        (folder / check_href(item)).write_text(page, encoding="utf-8")
        if on_check:
            on_check(n, len(items))
    index = folder / "index.html"
    index.write_text(batch_page(batch, list(items), check_href), encoding="utf-8")
    return index
