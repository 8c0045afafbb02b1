"""Check and batch ids in request paths, checked at the boundary before any store is asked.

An id is its prefix and 22 base64url characters (RFC 4648 §5): ``workers.store.ids`` makes it
from 16 random bytes with ``secrets.token_urlsafe``, which writes ceil(16 · 4 / 3) = 22
characters without padding. A path id of any other shape is answered 404 naming the parameter,
the same answer as an unknown id of the right shape: a store key built from it (a Redis key such
as ``batch:<id>:ids``) is never read, so nothing about what exists leaks through its type.

``CheckIdConverter`` and ``BatchIdConverter`` route like Werkzeug's ``string`` converter and
document the shape as the parameter's ``pattern`` in the OpenAPI document; the shape itself is
enforced by :func:`require_path_ids` (a ``before_request`` after authentication, so that a
request without a token is answered 401 whatever its path).
"""

from __future__ import annotations

import re
from typing import Any

from flask import request
from werkzeug.routing import BaseConverter

from service.problems import abort_problem, field_errors
from workers.store.ids import BATCH_PREFIX, CHECK_PREFIX

ID_BODY = "[A-Za-z0-9_-]{22}"
PATH_IDS: dict[str, tuple[str, re.Pattern[str]]] = {
    "check_id": ("check", re.compile(re.escape(CHECK_PREFIX) + ID_BODY)),
    "batch_id": ("batch", re.compile(re.escape(BATCH_PREFIX) + ID_BODY)),
}
MAX_ECHOED = 40  # characters of a bad id repeated in the answer


class CheckIdConverter(BaseConverter):
    """``<check_id:check_id>``: one path segment, documented as ``chk_`` + 22 characters."""


class BatchIdConverter(BaseConverter):
    """``<batch_id:batch_id>``: one path segment, documented as ``bat_`` + 22 characters."""


CONVERTERS: dict[str, type[BaseConverter]] = {
    "check_id": CheckIdConverter, "batch_id": BatchIdConverter}


def parameter_schema(converter: BaseConverter) -> dict[str, Any]:
    """The OpenAPI schema of a path parameter routed by one of :data:`CONVERTERS`."""
    name = "check_id" if isinstance(converter, CheckIdConverter) else "batch_id"
    return {"type": "string", "pattern": f"^{PATH_IDS[name][1].pattern}$"}


def require_path_ids() -> None:
    """``before_request``: 404 naming the parameter when a path id has the wrong shape."""
    for name, value in (request.view_args or {}).items():
        shape = PATH_IDS.get(name)
        if shape is None or not isinstance(value, str) or shape[1].fullmatch(value):
            continue
        what, pattern = shape
        shown = value if len(value) <= MAX_ECHOED else value[:MAX_ECHOED] + "…"
        prefix = pattern.pattern.split("[", 1)[0]
        abort_problem(404, f"no {what} {shown!r}", kind="not-found", errors=field_errors([
            (name, f"a {what} id is {prefix!r} followed by 22 base64url characters")]))
