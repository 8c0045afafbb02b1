"""Report pages and plots of finished checks, served by the API (same bearer tokens).

    GET /v1/checks/{id}/plots/{name}.svg | .png   name: ndf, admittance, factors, circles, or
                                                  device-<k> (return difference of the k-th
                                                  device); ?nodes=all: every node's admittance
    GET /v1/checks/{id}/report                    HTML page, plots embedded (?plots=none: without;
                                                  ?nodes=all: every node's admittance)
    GET /v1/batches/{id}/report                   HTML page: sortable table of the batch's checks
    GET /v1/batches/{id}/margin                   HTML page: the margin across the variants
                                                  (?order=submission | label)

(The CSV forms, ``/v1/checks/{id}/curves.csv`` and ``/v1/batches/{id}/margin.csv``, are in
the OpenAPI document: ``service.api.report_data``.)

The bodies are images and HTML; the OpenAPI document describes them as such (the routes, their
parameters and media types), and errors are problem+json like the rest of the API. Plots are
recomputed from the stored request (``service.reports.data``) and drawn on demand; a small
per-process cache keeps the last few, since a finished check never changes.
"""

from __future__ import annotations

import json
import re
import threading
from collections import OrderedDict
from typing import Any

from flask import Response, request, url_for
from flask_smorest import Blueprint

from service.api.common import check_view, document_errors
from service.api.path_ids import require_path_ids
from service.api.tenancy import authenticate, check_store, tenant
from service.problems import abort_problem, field_errors
from workers.store import StoredRequest

blp = Blueprint("reports", __name__, description="Report pages and plots of finished checks")
blp.before_request(authenticate)
blp.before_request(require_path_ids)  # after the token: 401 first

# the query parameters each page or plot documents; any other is refused (400 naming it)
KNOWN_QUERY = {"reports.check_plot": {"nodes"}, "reports.check_report": {"nodes", "plots"},
               "reports.batch_report": set(), "reports.batch_margin": {"order"}}


@blp.before_request
def _known_query_only() -> None:
    allowed = KNOWN_QUERY.get(request.endpoint or "")
    unknown = sorted(set(request.args) - allowed) if allowed is not None else []
    if unknown:
        abort_problem(400, f"unknown query parameter {unknown[0]!r}", kind="invalid-query",
                      errors=field_errors([(name, "unknown query parameter")
                                           for name in unknown]))

PLOT_NAMES = ("ndf", "admittance", "factors", "circles")
DEVICE_PLOT = re.compile(r"device-([1-9][0-9]*)")
NODE_CHOICES = ("relevant", "all")
PLOT_CHOICES = ("all", "none")
IMAGE_TYPES = {"svg": "image/svg+xml", "png": "image/png"}
NOTES = "device-notes"
CACHE_SIZE = 64
MAX_BATCH_PAGE_CHECKS = 10_000


CacheKey = tuple[str, str, str, str]


class _ImageCache:
    """Thread-safe LRU of rendered plots keyed by (check id, name, format, node choice)."""

    def __init__(self, size: int) -> None:
        self.size = size
        self._items: OrderedDict[CacheKey, bytes | None] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key: CacheKey) -> tuple[bool, bytes | None]:
        with self._lock:
            if key in self._items:
                self._items.move_to_end(key)
                return True, self._items[key]
        return False, None

    def put(self, key: CacheKey, value: bytes | None) -> None:
        with self._lock:
            self._items[key] = value
            self._items.move_to_end(key)
            while len(self._items) > self.size:
                self._items.popitem(last=False)


_CACHE = _ImageCache(CACHE_SIZE)

NODES_PARAMETER = {
    "in": "query", "name": "nodes", "required": False,
    "schema": {"type": "string", "enum": list(NODE_CHOICES), "default": "relevant"},
    "description": "admittance plot: the nodes that matter (default) or every node",
}
PLOTS_PARAMETER = {
    "in": "query", "name": "plots", "required": False,
    "schema": {"type": "string", "enum": list(PLOT_CHOICES), "default": "all"},
    "description": "none: the page without its plots (quicker)",
}
PLOT_PARAMETERS = [
    {"in": "path", "name": "name", "required": True,
     "schema": {"type": "string",
                "pattern": "^(" + "|".join(PLOT_NAMES) + "|" + DEVICE_PLOT.pattern + ")$"},
     "description": "ndf, admittance, factors (K and μ), circles, or device-<k>: the return "
                    "difference of the k-th device"},
    {"in": "path", "name": "fmt", "required": True,
     "schema": {"type": "string", "enum": list(IMAGE_TYPES)}},
    NODES_PARAMETER,
]
IMAGE_RESPONSE = {"200": {"description": "The plot", "content": {
    "image/svg+xml": {"schema": {"type": "string"}},
    "image/png": {"schema": {"type": "string", "format": "binary"}}}}}
PAGE_RESPONSE = {"200": {"description": "The HTML page (self-contained: styles, script and "
                                        "plots inline)",
                         "content": {"text/html": {"schema": {"type": "string"}}}}}


def done_check(check_id: str) -> tuple[Any, StoredRequest]:
    """The tenant's finished check and its stored request (``service.runner.load_request``
    reads it back); 404 unknown, 409 not done."""
    record = check_store().get_check(tenant(), check_id)
    if record is None:
        abort_problem(404, f"no check {check_id!r}", kind="not-found")
    if record.status != "done" or not record.verdict:
        abort_problem(409, f"check {check_id!r} is {record.status}; plots exist once it is done",
                      kind="not-done", headers={"Retry-After": "2"})
    payload = check_store().get_request(check_id)
    if payload is None:
        abort_problem(404, f"the request of check {check_id!r} is no longer stored",
                      kind="not-found")
    return record, payload


def query_choice(name: str, choices: tuple[str, ...], default: str) -> str:
    """A query parameter that must be one of ``choices`` (400 problem naming it otherwise)."""
    choice = request.args.get(name, default)
    if choice not in choices:
        abort_problem(400, f"{name} must be one of {', '.join(choices)}, not {choice!r}",
                      kind="invalid-query", errors=field_errors([(name, "not one of "
                                                                  + ", ".join(choices))]))
    return choice


def _node_choice() -> str:
    return query_choice("nodes", NODE_CHOICES, "relevant")


def _plots(check_id: str, names: tuple[str, ...], fmt: str, nodes: str = "relevant"
           ) -> tuple[dict[str, bytes | None], dict[str, str]]:
    """Rendered plots (from the cache when possible) and why null device counts are null;
    matplotlib is imported on first use. Only the admittance plot depends on ``nodes``."""
    def key(name: str) -> CacheKey:
        return (check_id, name, fmt, nodes if name == "admittance" else "relevant")

    found: dict[str, bytes | None] = {}
    missing = []
    for name in names:
        hit, image = _CACHE.get(key(name))
        if hit:
            found[name] = image
        else:
            missing.append(name)
    hit, notes = _CACHE.get((check_id, NOTES, "json", "-"))
    if missing or not hit:
        from service.reports.data import figure_data
        from service.reports.plots import render_plot

        record, payload = done_check(check_id)
        data = figure_data(payload, record.verdict, nodes=nodes)  # type: ignore[arg-type]
        for name in missing:
            image = render_plot(name, data, fmt)  # type: ignore[arg-type]
            _CACHE.put(key(name), image)
            found[name] = image
        notes = json.dumps(data.device_notes()).encode()
        _CACHE.put((check_id, NOTES, "json", "-"), notes)
    return found, json.loads(notes or b"{}")


def _device_notes(check_id: str, verdict: dict[str, Any]) -> dict[str, str]:
    """Why null device counts are null, for a page without plots (no refinement, no drawing)."""
    from service.reports.devices import needs_notes

    if not needs_notes(verdict):
        return {}
    hit, notes = _CACHE.get((check_id, NOTES, "json", "-"))
    if not hit:
        from service.reports.data import request_device_notes

        record, payload = done_check(check_id)
        notes = json.dumps(request_device_notes(payload, record.verdict)).encode()
        _CACHE.put((check_id, NOTES, "json", "-"), notes)
    return json.loads(notes or b"{}")


@blp.route("/v1/checks/<check_id:check_id>/plots/<string:name>.<string:fmt>", methods=["GET"])
@blp.doc(operationId="getCheckPlot", parameters=PLOT_PARAMETERS, responses=IMAGE_RESPONSE)
@document_errors(blp, 400, 401, 404, 409, 429)
def check_plot(check_id: str, name: str, fmt: str) -> Response:
    """One plot of a finished check as SVG or PNG."""
    if name not in PLOT_NAMES and not DEVICE_PLOT.fullmatch(name):
        abort_problem(404, f"no plot {name!r}; plots: {', '.join(PLOT_NAMES)}, device-<k>",
                      kind="not-found")
    if fmt not in IMAGE_TYPES:
        abort_problem(404, f"no format {fmt!r}; formats: svg, png", kind="not-found")
    nodes = _node_choice()
    done_check(check_id)  # tenant, existence and status checked on every request
    image = _plots(check_id, (name,), fmt, nodes)[0][name]
    if image is None:
        abort_problem(404, f"check {check_id!r} has no {name} plot (e.g. no two-port: it needs "
                           "exactly two external ports; device-<k>: no k-th device)",
                      kind="not-found")
    return Response(image, mimetype=IMAGE_TYPES[fmt],
                    headers={"Cache-Control": "private, max-age=3600"})


@blp.route("/v1/checks/<check_id:check_id>/report", methods=["GET"])
@blp.doc(operationId="getCheckReport", parameters=[NODES_PARAMETER, PLOTS_PARAMETER],
         responses=PAGE_RESPONSE)
@document_errors(blp, 400, 401, 404, 429)
def check_report(check_id: str) -> Response:
    """The HTML page of one check (plots embedded when it is done)."""
    from service.reports.pages import check_page

    record = check_store().get_check(tenant(), check_id)
    if record is None:
        abort_problem(404, f"no check {check_id!r}", kind="not-found")
    nodes = _node_choice()
    with_plots = query_choice("plots", PLOT_CHOICES, PLOT_CHOICES[0]) == "all"
    images: dict[str, bytes | None] = {}
    notes: dict[str, str] = {}
    all_nodes_href = None
    if record.status == "done" and record.verdict:
        if with_plots:
            devices = tuple(f"device-{d.get('order')}" for d in record.verdict.get("devices")
                            or [] if isinstance(d.get("order"), int))
            images, notes = _plots(check_id, PLOT_NAMES + devices, "svg", nodes)
            if nodes != "all":
                all_nodes_href = url_for("reports.check_report", check_id=check_id,
                                         nodes="all") + "#plot-admittance"
        else:
            notes = _device_notes(check_id, record.verdict)
    batch_href = (url_for("reports.batch_report", batch_id=record.batch_id)
                  if record.batch_id else None)
    page = check_page(check_view(record), images, batch_href=batch_href, device_notes=notes,
                      all_nodes_href=all_nodes_href)
    return Response(page, mimetype="text/html")


def batch_items(batch_id: str) -> tuple[Any, list[dict[str, Any]]]:
    """The tenant's batch and its listing rows in submission order (404 unknown)."""
    from service.api.batches import item_view

    record = check_store().get_batch(tenant(), batch_id)
    if record is None:
        abort_problem(404, f"no batch {batch_id!r}", kind="not-found")
    items: list[dict[str, Any]] = []
    after = None
    while len(items) < MAX_BATCH_PAGE_CHECKS:
        page, after = check_store().list_batch_checks(tenant(), batch_id, after=after, limit=1000)
        items.extend(item_view(r) for r in page)
        if after is None:
            break
    return record, items


def batch_verdicts(items: list[dict[str, Any]]) -> dict[str, dict[str, Any]]:
    """Check id → verdict of every finished check (the listing rows carry only a summary)."""
    found = {}
    for item in items:
        if item.get("status") == "done":
            record = check_store().get_check(tenant(), item["id"])
            if record is not None and record.verdict:
                found[item["id"]] = record.verdict
    return found


def trend_order() -> str:
    from service.reports.trend import TREND_ORDERS

    return query_choice("order", TREND_ORDERS, "submission")


@blp.route("/v1/batches/<batch_id:batch_id>/report", methods=["GET"])
@blp.doc(operationId="getBatchReport", responses=PAGE_RESPONSE)
@document_errors(blp, 400, 401, 404, 429)  # 400: a query parameter (it takes none)
def batch_report(batch_id: str) -> Response:
    """The HTML page of a batch: every check, sortable by verdict, frequency, node and margin."""
    from service.api.batches import batch_view
    from service.reports.pages import batch_page

    record, items = batch_items(batch_id)
    page_html = batch_page(batch_view(record, size=len(record.check_ids)), items,
                           lambda item: url_for("reports.check_report", check_id=item["id"]),
                           batch_verdicts(items),
                           url_for("reports.batch_margin", batch_id=batch_id))
    return Response(page_html, mimetype="text/html")


@blp.route("/v1/batches/<batch_id:batch_id>/margin", methods=["GET"])
@blp.doc(operationId="getBatchMarginPage", parameters=[{
    "in": "query", "name": "order", "required": False,
    "schema": {"type": "string", "enum": ["submission", "label"], "default": "submission"},
    "description": "variants in submission order or by label"}], responses=PAGE_RESPONSE)
@document_errors(blp, 400, 401, 404, 429)
def batch_margin(batch_id: str) -> Response:
    """The margin across the batch's variants: ζ and frequency of each least-damped natural
    frequency, in submission order or by label (?order=)."""
    from service.api.batches import batch_view
    from service.reports.pages import trend_page
    from service.reports.plot_trend import trend_figure
    from service.reports.plots import render
    from service.reports.trend import trend_rows

    order = trend_order()
    record, items = batch_items(batch_id)
    rows = trend_rows(items, batch_verdicts(items), order)  # type: ignore[arg-type]
    other = "label" if order == "submission" else "submission"
    page = trend_page(batch_view(record, size=len(record.check_ids)), rows,
                      render(trend_figure(rows), "svg"), order,
                      url_for("reports.batch_margin", batch_id=batch_id, order=other),
                      url_for("report_data.batch_margin_csv", batch_id=batch_id, order=order),
                      url_for("reports.batch_report", batch_id=batch_id))
    return Response(page, mimetype="text/html")
