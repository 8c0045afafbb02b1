"""Taking in a batch: one path per content type, each validated by the schema the OpenAPI
document shows (``service.schemas.batch``), both ending in the same lazy source of checks.

JSON: the body is cut into its variants' texts (``service.api.jsonbody.cut_batch``), the envelope
loaded by ``BatchRequestSchema``. Multipart: the form's parts (the ``map`` part read as JSON)
loaded by ``BatchUploadSchema``, each file becoming the variant
``{"label": <file name>, "touchstone": <text>}``. Then :class:`ValidatedVariants` makes each
variant's check when the store reaches it (parsed, merged over the map, validated, encoded, and
dropped before the next), so the store writes and queues the first ones while later ones are
still being validated; an invalid variant ends the batch with the 422 naming every problem of
every variant, and the store deletes what it had written (``CheckStore.create_checks``).
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

from flask import current_app, g, request
from marshmallow import ValidationError

from service.api.common import IDEMPOTENCY_HEADER, json_object_body, parse_json
from service.api.jsonbody import cut_batch
from service.api.request_reader import read_request
from service.intake import new_check
from service.problems import abort_problem, field_errors
from service.schemas.batch import (
    BatchRequestSchema,
    BatchUploadSchema,
    VariantError,
    load_variant,
    part_bytes,
)
from service.schemas.errors import flatten_errors
from service.schemas.request import CheckRequestSchema
from workers.engine.errors import TouchstoneError
from workers.engine.touchstone import decode_text
from workers.engine.touchstone.options import ports_from_filename
from workers.intake import SharedArrays
from workers.store import NewCheck, Priority

MAX_REPORTED_ERRORS = 100


@dataclass(frozen=True)
class BatchIntake:
    """A batch as taken in: its label, its variants as checks to store, and the fingerprint of
    its content for an idempotent retry (None without an ``Idempotency-Key``)."""

    label: str | None
    checks: ValidatedVariants
    fingerprint: str | None
    priority: Priority = "normal"
    callback_url: str | None = None


class _Problems:
    """Collects (field, message) pairs across the whole batch."""

    def __init__(self) -> None:
        self.pairs: list[tuple[str, str]] = []
        self.bad_variants = 0

    def add(self, field: str, message: str) -> None:
        self.pairs.append((field, message))

    def raise_if_any(self, n_variants: int) -> None:
        if not self.pairs:
            return
        first = f"{self.pairs[0][0]}: {self.pairs[0][1]}"
        detail = (f"{self.bad_variants} of {n_variants} variants are invalid; nothing was stored."
                  f" First: {first}" if self.bad_variants else first)
        more = len(self.pairs) - MAX_REPORTED_ERRORS
        if more > 0:
            detail += f" ({more} further errors not listed)"
        abort_problem(422, detail, kind="invalid-request",
                      errors=field_errors(self.pairs[:MAX_REPORTED_ERRORS]))


class ValidatedVariants:
    """The variants as checks to store, each made when it is reached: ``variant(i)`` gives the
    variant as a JSON object (and may raise :class:`VariantError`), which is merged over the map,
    validated and encoded with the batch's shared arrays.

    Iterating yields the valid variants in order until the first invalid one; it then validates
    the rest without yielding them and raises the 422 that names every problem."""

    def __init__(self, count: int, variant: Callable[[int], Any], shared: dict[str, Any],
                 where: str) -> None:
        self._count = count
        self._variant = variant
        self._shared = shared
        self._where = where
        self.arrays = SharedArrays()  # what the variants have in common is stored once

    def __len__(self) -> int:
        return self._count

    def __iter__(self) -> Iterator[NewCheck]:
        schema = CheckRequestSchema()
        problems = _Problems()
        for i in range(self._count):
            check = self._check(i, schema, problems)
            if check is not None and not problems.pairs:
                yield check
        problems.raise_if_any(self._count)

    def _check(self, i: int, schema: CheckRequestSchema, problems: _Problems) -> NewCheck | None:
        value: Any = None
        try:
            value = self._variant(i)
            label, checked = load_variant(value, self._shared, schema)
        except VariantError as exc:
            problems.bad_variants += 1
            name = value.get("label") if isinstance(value, dict) else None
            named = f" ({name!r})" if isinstance(name, str) and name else ""
            for field, message in exc.errors:
                at = field if field.startswith("map.") else self._field(i, field)
                problems.add(at, f"variant {i}{named}: {message}")
            return None
        return new_check(checked, label, self.arrays)

    def _field(self, i: int, field: str) -> str:
        if self._where == "files" and field == "label":  # a file's label is its name
            field = ""
        return f"{self._where}.{i}.{field}".rstrip(".")


def _envelope(schema: BatchRequestSchema | BatchUploadSchema, body: dict[str, Any]
              ) -> dict[str, Any]:
    """The envelope loaded by ``schema`` (the 422 names every problem), then the limit of
    variants per batch."""
    try:
        loaded = schema.load(body)
    except ValidationError as exc:
        problems = _Problems()
        for field, message in flatten_errors(exc.messages):
            problems.add(field, message)
        problems.raise_if_any(0)
    items = "variants" if isinstance(schema, BatchRequestSchema) else "files"
    limit = int(current_app.config["BALLAST_MAX_VARIANTS"])
    if len(loaded[items]) > limit:
        abort_problem(422, f"{len(loaded[items])} variants; the limit is {limit} per batch",
                      kind="invalid-request",
                      errors=field_errors([(items, f"at most {limit} variants")]))
    return loaded


def json_batch() -> BatchIntake:
    """``application/json``: ``BatchRequestSchema``, each variant parsed when it is reached."""
    body = _envelope(BatchRequestSchema(), json_object_body(cut_batch))
    texts: list[Any] = body["variants"]
    shared = body.get("map", {})

    def variant(i: int) -> Any:
        text = texts[i]
        if not isinstance(text, bytes | memoryview):
            return text
        try:  # the body's syntax was checked whole; only nesting too deep for the stack is left
            return read_request(text)
        except ValueError as exc:
            raise VariantError([("", f"is not valid JSON: {exc}")]) from None

    return BatchIntake(body.get("label"),
                       ValidatedVariants(len(texts), variant, shared, "variants"),
                       g.body_digest, body["priority"], body.get("callback_url"))


def multipart_form() -> dict[str, Any]:
    """The form's parts as one object (files as lists of parts), the ``map`` part read as JSON
    (400 when it is not)."""
    body: dict[str, Any] = {name: request.form.get(name) for name in request.form}
    for name in request.files:
        parts = request.files.getlist(name)
        body[name] = parts if name == "files" else parts[0]
    if "files" in request.form:  # text parts named files: the schema reads them as files too
        body["files"] = request.form.getlist("files") + list(request.files.getlist("files"))
    if "map" in body:
        part = body["map"]
        body["map"] = parse_json(part.read() if hasattr(part, "read") else part,
                                 "the 'map' part")
    return body


def multipart_batch() -> BatchIntake:
    """``multipart/form-data``: ``BatchUploadSchema``, one variant per file."""
    body = _envelope(BatchUploadSchema(), multipart_form())
    files: list[tuple[str | None, Any]] = body["files"]
    shared = body["map"]

    ports = shared.get("ports") if isinstance(shared, dict) else None

    def variant(i: int) -> Any:
        name, part = files[i]
        data = part_bytes(part)  # one file in memory at a time (werkzeug spools large parts)
        named = ports_from_filename(name)
        if named is not None and isinstance(ports, list) and named != len(ports):
            raise VariantError([("", f"the file name {name!r} says {named} ports (.s{named}p) "
                                     f"but the map, which the data must match, has {len(ports)}")])
        try:  # Touchstone bytes: BOM dropped, comments in any 8-bit encoding
            text = decode_text(data)
        except TouchstoneError as exc:
            raise VariantError([("", exc.message)]) from exc
        return {"touchstone": text} if name is None else {"label": name, "touchstone": text}

    label = body.get("label")
    fingerprint = (_upload_fingerprint(label, shared, files)
                   if request.headers.get(IDEMPOTENCY_HEADER) is not None else None)
    return BatchIntake(label, ValidatedVariants(len(files), variant, shared, "files"),
                       fingerprint, body["priority"], body.get("callback_url"))


def _upload_fingerprint(label: str | None, shared: dict[str, Any],
                        files: Sequence[tuple[str | None, Any]]) -> str:
    """SHA-256 over the label, the map and each file's name and bytes (a multipart body's part
    boundaries change from one sending to the next, so its bytes cannot be the fingerprint)."""
    digest = hashlib.sha256(json.dumps(
        [label, shared, request.form.get("priority"), request.form.get("callback_url")],
        sort_keys=True).encode())
    for name, part in files:
        digest.update(json.dumps(name).encode() + hashlib.sha256(part_bytes(part)).digest())
    return digest.hexdigest()
