"""JSON log lines for ballast's own loggers (``ballast.*``), with the id of the HTTP request
that a line belongs to, in the API and in the worker that runs the request's checks.

One JSON object per line (python-json-logger): ``time``, ``level``, ``logger``, ``message``,
``request_id`` when known, and the fields a call passes in ``extra`` (check and batch ids,
tenant, verdict, seconds). Tokens never reach a line: the API logs no header and no body, and a
filter masks anything shaped like an API token or a webhook secret that a message might carry.
Celery's own lines keep Celery's format.
"""

from __future__ import annotations

import contextvars
import logging
import re
import sys
from typing import IO

from pythonjsonlogger.json import JsonFormatter

REQUEST_ID: contextvars.ContextVar[str | None] = contextvars.ContextVar("ballast_request_id",
                                                                        default=None)
_SECRET_SHAPES = re.compile(r"(blst_|whsec_)[A-Za-z0-9_\-+/=]{6,}")
_HANDLER_NAME = "ballast-json"


class RequestContext(logging.Filter):
    """Adds ``request_id`` and masks secrets in the message."""

    def filter(self, record: logging.LogRecord) -> bool:
        if getattr(record, "request_id", None) is None:
            record.request_id = REQUEST_ID.get()
        message = record.getMessage()
        if _SECRET_SHAPES.search(message):
            record.msg = _SECRET_SHAPES.sub(r"\1[redacted]", message)
            record.args = None
        return True


def configure_json_logging(stream: IO[str] | None = None, level: int = logging.INFO) -> None:
    """Send the ``ballast`` loggers' lines, as JSON, to ``stream`` (default stderr); once per
    process (a second call changes nothing)."""
    root = logging.getLogger("ballast")
    if any(h.get_name() == _HANDLER_NAME for h in root.handlers):
        return
    handler = logging.StreamHandler(stream or sys.stderr)
    handler.set_name(_HANDLER_NAME)
    handler.setFormatter(JsonFormatter(
        "{asctime}{levelname}{name}{message}", style="{",
        rename_fields={"asctime": "time", "levelname": "level", "name": "logger"}))
    handler.addFilter(RequestContext())
    root.addHandler(handler)
    root.setLevel(level)
    root.propagate = False
