"""Curves and margins as CSV, for a spreadsheet or a script (issue 12):

    GET /v1/checks/{id}/curves.csv     NDF, each F_k and each node's Y, at the samples and on
                                       the refined contour (columns: ``service.reports.curves``)
    GET /v1/batches/{id}/margin.csv    each variant's least-damped natural frequency and closest
                                       |NDF| (columns: ``service.reports.trend``), ?order=

A flask-smorest blueprint, so both are in the OpenAPI document; the HTML forms are in
``service.api.reports``. Curves are recomputed from the stored request (a fraction of a second).
"""

from __future__ import annotations

from typing import Any

from flask import Response
from flask_smorest import Blueprint
from marshmallow import RAISE

from service.api.common import document_errors
from service.api.reports import batch_items, batch_verdicts, done_check
from service.api.tenancy import authenticate
from service.problems import PROBLEM_CONTENT_TYPE, ProblemSchema
from service.schemas.reports import TrendQuerySchema

blp = Blueprint("report_data", __name__, description="Curves and margins as CSV")
blp.before_request(authenticate)

CSV_TYPE = "text/csv"
CURVES_DESCRIPTION = (
    "RFC 4180 CSV, one row per frequency (increasing): frequency_hz; source (sample: the data, "
    "model: the validated rational model between samples, the refined contour); ndf_re, ndf_im; "
    "F_<device>_re, F_<device>_im per device in switch-on order (return differences); "
    "Y_<node>_re_s, Y_<node>_im_s per port (driving-point admittance, siemens). Empty cells: "
    "undefined there (singular sample) or no validated model for that curve.")
MARGIN_DESCRIPTION = (
    "RFC 4180 CSV, one row per variant: position (submission order, from 1), id, label, "
    "verdict, least_damping_ratio (ζ = −σ/|s| of the least-damped natural frequency in the "
    "band; < 0 grows), least_damped_frequency_hz, least_damped_growth_rate_per_s, "
    "target_damping_ratio, min_abs_ndf, min_abs_ndf_frequency_hz. Empty cells: not known "
    "(unfinished check, or no validated model).")
NOT_DONE = {"description": "The check has not finished yet", "headers": {
    "Retry-After": {"schema": {"type": "integer"}, "description": "seconds before trying again"}}}


def _csv(text: str, name: str) -> Response:
    return Response(text, mimetype=CSV_TYPE, headers={
        "Content-Disposition": f'attachment; filename="{name}"'})


@blp.route("/v1/checks/<check_id:check_id>/curves.csv", methods=["GET"])
@blp.doc(operationId="getCheckCurves", responses={"200": {
    "description": CURVES_DESCRIPTION,
    "content": {CSV_TYPE: {"schema": {"type": "string"}}}}})
@blp.alt_response(409, schema=ProblemSchema, content_type=PROBLEM_CONTENT_TYPE, **NOT_DONE)
@document_errors(blp, 401, 404, 429)
def check_curves(check_id: str) -> Response:
    """A finished check's NDF, return differences and node admittances as CSV."""
    from service.reports.curves import curves_csv

    _, payload = done_check(check_id)
    return _csv(curves_csv(payload), f"{check_id}-curves.csv")


@blp.route("/v1/batches/<batch_id:batch_id>/margin.csv", methods=["GET"])
@blp.arguments(TrendQuerySchema, location="query", as_kwargs=True, unknown=RAISE)
@blp.doc(operationId="getBatchMargin", responses={"200": {
    "description": MARGIN_DESCRIPTION,
    "content": {CSV_TYPE: {"schema": {"type": "string"}}}}})
@document_errors(blp, 400, 401, 404, 422, 429)
def batch_margin_csv(batch_id: str, **query: Any) -> Response:
    """The margin of every variant of a batch as CSV, in submission order or by label."""
    from service.reports.trend import trend_csv, trend_rows

    _, items = batch_items(batch_id)
    rows = trend_rows(items, batch_verdicts(items), query.get("order", "submission"))
    return _csv(trend_csv(rows), f"{batch_id}-margin.csv")
