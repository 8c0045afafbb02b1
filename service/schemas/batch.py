"""The batch bodies of ``POST /v1/batches``, as the OpenAPI document shows them and as they are
validated: the same schema objects do both.

JSON: ``BatchRequestSchema`` (a label, the shared ``map``, the ``variants``). The envelope is
loaded whole; each variant only when its turn comes (:func:`load_variant`), so that a large batch
is validated, stored and queued variant after variant: its ``variants`` field checks the list and
keeps the items as they came (their JSON texts), its ``map`` field checks the member names and
keeps the members, which each variant's merged request then validates.
Multipart: ``BatchUploadSchema`` (the map as a JSON part, an optional label, one Touchstone file
per variant, named by the file's name); each file is then the variant
``{"label": <file name>, "touchstone": <text>}``.

A variant is as ``BatchVariantSchema`` documents it: check request members and a ``label``; the
members are merged over the map (the variant's win) and the result is loaded by
``CheckRequestSchema`` into the engine's request. Adding an optional check request member to
``CheckRequestSchema`` adds it here too.
"""

from __future__ import annotations

import copy
from collections.abc import Mapping
from typing import Any

from marshmallow import RAISE, Schema, ValidationError, fields, validate

from service.schemas.errors import flatten_errors
from service.schemas.request import CheckRequestSchema
from service.schemas.submission import callback_url_field, priority_field
from workers.engine.request import CheckRequest

# Check request members a batch's shared map or one of its variants may give.
REQUEST_FIELDS: tuple[str, ...] = tuple(CheckRequestSchema._declared_fields)
MAX_LABEL = 200


def _optional_request_fields() -> dict[str, fields.Field]:
    out = {}
    for name, field in CheckRequestSchema._declared_fields.items():
        clone = copy.deepcopy(field)
        clone.required = False
        out[name] = clone
    return out


class _Strict(Schema):
    class Meta:
        unknown = RAISE


BatchMapSchema = _Strict.from_dict(_optional_request_fields(), name="BatchMapSchema")
BatchMapSchema.__doc__ = "Check request members shared by every variant of a batch."

BatchVariantSchema = _Strict.from_dict(
    {
        **_optional_request_fields(),
        "label": fields.String(validate=validate.Length(max=MAX_LABEL),
                               metadata={"description": "the variant's name in listings"}),
    },
    name="BatchVariantSchema",
)
BatchVariantSchema.__doc__ = (
    "One variant: check request members merged over the shared map (the variant's win)."
)
_VARIANT_LABEL: fields.Field = BatchVariantSchema._declared_fields["label"]


def _unknown_members(value: Any, schema: Schema) -> dict[str, Any]:
    """``value`` if it is an object with none but ``schema``'s members, else the error."""
    if not isinstance(value, dict):
        raise ValidationError(["Invalid input type."])
    unknown = sorted(set(value) - set(schema.fields))
    if unknown:
        raise ValidationError({name: ["Unknown field."] for name in unknown})
    return value


class SharedMap(fields.Nested):
    """The shared map: an object of the nested schema's members, kept as sent (every variant's
    merged request validates them, and errors in them are named ``map.<member>``)."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Any:
        return _unknown_members(value, self.schema)


class MapPart(fields.Field):
    """The multipart ``map`` part, read as JSON (by the body's reader), checked like
    :class:`SharedMap`; documented as the string the part is."""

    def __init__(self, **kwargs: Any) -> None:
        self.members = BatchMapSchema()
        super().__init__(**kwargs)

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Any:
        return _unknown_members(value, self.members)


class VariantList(fields.List):
    """The variants: a list, its items kept as they came (loaded one by one by
    :func:`load_variant` when the batch is stored)."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Any:
        if not isinstance(value, list):
            raise self.make_error("invalid")
        return value


class UploadedFile(fields.Field):
    """One file part: its name and the part, read when its variant's turn comes
    (:func:`part_bytes`), so that a batch's files are not all in memory at once."""

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any
                     ) -> tuple[str | None, Any]:
        if isinstance(value, str):  # a plain form field in place of a file part
            return None, value.encode()
        if not hasattr(value, "read"):
            raise ValidationError("must be a file part")
        return getattr(value, "filename", None) or None, value


def part_bytes(part: Any) -> bytes:
    """The bytes of a part as :class:`UploadedFile` keeps it (read from its start)."""
    if isinstance(part, bytes):
        return part
    part.seek(0)
    return part.read()


class BatchRequestSchema(_Strict):
    """A batch: one shared map, many variants (the merged result of each is a check request)."""

    label = fields.String(validate=validate.Length(max=MAX_LABEL))
    map = SharedMap(BatchMapSchema, metadata={"description": "shared members, stored once"})
    variants = VariantList(fields.Nested(BatchVariantSchema), required=True,
                           validate=validate.Length(min=1))
    priority = priority_field()
    callback_url = callback_url_field()


class BatchUploadSchema(_Strict):
    """Multipart form: the shared map as a JSON part and one Touchstone file per variant."""

    map = MapPart(required=True, metadata={
        "type": "string", "description": "JSON object: the shared map (ports, devices, options …)"},
        error_messages={"required": "missing: send the shared map as a JSON part named 'map'"})
    label = fields.String(validate=validate.Length(max=MAX_LABEL),
                          metadata={"description": "the batch's label"})
    files = fields.List(
        UploadedFile(metadata={"type": "string", "format": "binary"}), required=True,
        validate=validate.Length(min=1),
        metadata={"description": "Touchstone files; each file's name is its label"},
        error_messages={"required": "send one Touchstone file per variant in parts named 'files'"},
    )
    priority = priority_field()
    callback_url = callback_url_field()


class VariantError(Exception):
    """A variant that is not a valid check request: ``errors`` are (field, message) pairs, each
    field named where it was given (a member or ``label`` of the variant, or ``map.<member>``)."""

    def __init__(self, errors: list[tuple[str, str]]) -> None:
        super().__init__(errors)
        self.errors = errors


def load_variant(value: Any, shared: Mapping[str, Any],
                 schema: CheckRequestSchema) -> tuple[str | None, CheckRequest]:
    """One variant (a JSON object, as ``BatchVariantSchema`` documents it) merged over the
    shared map: its label and the validated request; raises :class:`VariantError`."""
    if not isinstance(value, dict):
        raise VariantError([("", "must be a JSON object")])
    errors: list[tuple[str, str]] = []
    label = None
    if "label" in value:
        try:
            label = _VARIANT_LABEL.deserialize(value["label"])
        except ValidationError as exc:
            errors += [("label", message) for _, message in flatten_errors(exc.messages)]
    member = {name: item for name, item in value.items() if name != "label"}
    try:
        request = schema.load({**shared, **member})
    except ValidationError as exc:
        for field, message in flatten_errors(exc.messages):
            top = field.split(".", 1)[0]
            given_here = top in member or top not in shared or field == "body"
            errors.append((field if given_here else f"map.{field}", message))
    if errors:
        raise VariantError(errors)
    return label, request
