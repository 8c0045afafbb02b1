"""The HTTP API: a flask-smorest ``Api`` that speaks problem+json, and its blueprints.

Blueprints: ``health`` (/healthz, /readyz, no token), ``checks`` (/v1/checks) and ``batches``
(/v1/batches). A new group of endpoints adds a module here with a ``blp`` and joins
``BLUEPRINTS``; requests under /v1 are authenticated and rate-limited by ``service.api.tenancy``.
"""

from __future__ import annotations

from http import HTTPStatus

from flask_smorest import Api
from flask_smorest.utils import prepare_response
from werkzeug.exceptions import HTTPException

from service.problems import PROBLEM_CONTENT_TYPE, ProblemSchema, from_http_exception


class ProblemApi(Api):
    """flask-smorest's Api with RFC 9457 errors (documented and served) and headers kept."""

    ERROR_SCHEMA = ProblemSchema

    def handle_http_exception(self, error: HTTPException):  # type: ignore[override]
        return from_http_exception(error)

    def _register_responses(self) -> None:
        for status in HTTPStatus:
            response: dict = {"description": status.phrase}
            if not (100 <= status < 200) and status not in (204, 304):
                response["schema"] = self.ERROR_SCHEMA
            prepare_response(response, self.spec, PROBLEM_CONTENT_TYPE)
            self.spec.components.response(status.name, response, lazy=True)
        response = {"description": "Error (RFC 9457 problem details)", "schema": self.ERROR_SCHEMA}
        prepare_response(response, self.spec, PROBLEM_CONTENT_TYPE)
        self.spec.components.response(self.DEFAULT_ERROR_RESPONSE_NAME, response, lazy=True)
