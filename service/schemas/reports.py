"""Query parameters of the report data endpoints (``service.api.report_data``)."""

from __future__ import annotations

from marshmallow import RAISE, Schema, fields, validate

from service.reports.trend import TREND_ORDERS


class TrendQuerySchema(Schema):
    class Meta:
        unknown = RAISE

    order = fields.String(load_default="submission", validate=validate.OneOf(TREND_ORDERS),
                          metadata={"description": "submission (the batch's order) or label "
                                                   "(numbers inside labels by value)"})
