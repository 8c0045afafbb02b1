"""The verdict's JSON Schema (``ballast.verdict/1``), generated from the engine's dataclasses.

``verdict_components()`` walks ``CheckVerdict`` and every record it holds (``dataclasses.fields``
and ``typing.get_type_hints``), so the document cannot drift from what the engine serialises
(``CheckVerdict.to_dict``). Schemas are JSON Schema 2020-12, the dialect of OpenAPI 3.1:

- ``int`` → integer, ``bool`` → boolean, ``str`` → string, ``Literal`` → an enum;
- ``float`` → number or null: the serialiser writes a non-finite value (inf, nan) as null;
- ``X | None`` → X or null, except where the JSON leaves the field out instead (``OMITTED``);
- ``list``/``tuple[X, ...]`` → array, ``tuple[A, B]`` → an array of exactly those items,
  ``dict[str, X]`` → an object of X, ``Any`` → any JSON value (diagnostic ``details``);
- a dataclass or ``TypedDict`` → a component of its own (closed: ``additionalProperties``
  false), its docstring as description.
"""

from __future__ import annotations

import dataclasses
import types
import typing
from typing import Any, Literal, Union, get_args, get_origin, get_type_hints, is_typeddict

from workers.engine.verdict import VERDICT_FORMAT, CheckVerdict

VERDICT_COMPONENT = "Verdict"
VERDICT_REF = f"#/components/schemas/{VERDICT_COMPONENT}"
_NAMES = {"CheckVerdict": VERDICT_COMPONENT}

#: fields the JSON leaves out (rather than writing null) when they are None:
#: ``CheckVerdict.to_dict`` (next_sweep), ``RefinementReport.to_dict`` (every part that may be)
OMITTED: dict[str, set[str] | Literal["every nullable"]] = {
    "CheckVerdict": {"next_sweep"},
    "RefinementReport": "every nullable",
}

_NULL = {"type": "null"}
_SCALARS: dict[Any, dict[str, Any]] = {
    int: {"type": "integer"}, bool: {"type": "boolean"}, str: {"type": "string"},
    float: {"type": ["number", "null"]},
}


def _component_name(cls: type) -> str:
    return _NAMES.get(cls.__name__, cls.__name__)


def _description(cls: type) -> str | None:
    """The record's own docstring (not the signature a dataclass makes up without one)."""
    doc = cls.__dict__.get("__doc__")
    if not doc or doc.startswith(f"{cls.__name__}("):
        return None
    return " ".join(doc.split())


def _is_record(tp: Any) -> bool:
    return isinstance(tp, type) and (dataclasses.is_dataclass(tp) or is_typeddict(tp))


def _nullable(schema: dict[str, Any]) -> dict[str, Any]:
    if schema.get("type") == ["number", "null"]:
        return schema
    if set(schema) == {"type"} and isinstance(schema["type"], str):
        return {"type": [schema["type"], "null"]}
    return {"anyOf": [schema, _NULL]}


class _Builder:
    def __init__(self) -> None:
        self.components: dict[str, dict[str, Any]] = {}
        self._classes: dict[str, type] = {}

    def schema(self, tp: Any) -> dict[str, Any]:
        """JSON Schema of one annotation (records become references to their component)."""
        if tp in _SCALARS:
            return dict(_SCALARS[tp])
        if tp is Any:
            return {}
        if _is_record(tp):
            return {"$ref": f"#/components/schemas/{self.record(tp)}"}
        origin, args = get_origin(tp), get_args(tp)
        if origin is Literal:
            kinds = {type(a) for a in args}
            if kinds != {str}:
                raise TypeError(f"only string literals are supported, not {tp!r}")
            return {"type": "string", "enum": list(args)}
        if origin in (Union, types.UnionType):
            rest = [a for a in args if a is not type(None)]
            inner = self.schema(rest[0]) if len(rest) == 1 else {
                "anyOf": [self.schema(a) for a in rest]}
            return _nullable(inner) if len(rest) < len(args) else inner
        if origin is list or (origin is tuple and len(args) == 2 and args[1] is Ellipsis):
            return {"type": "array", "items": self.schema(args[0])}
        if origin is tuple:
            # maxItems, not "items": false (which openapi-spec-validator cannot resolve)
            return {"type": "array", "prefixItems": [self.schema(a) for a in args],
                    "minItems": len(args), "maxItems": len(args)}
        if origin is dict and args and args[0] is str:
            return {"type": "object", "additionalProperties": self.schema(args[1])}
        raise TypeError(f"no JSON Schema for the annotation {tp!r}")

    def record(self, cls: type) -> str:
        """Register the component of a dataclass or TypedDict; its name."""
        name = _component_name(cls)
        if self._classes.get(name, cls) is not cls:
            raise TypeError(f"two verdict records are both named {name}")
        if name in self._classes:
            return name
        self._classes[name] = cls
        hints = get_type_hints(cls)
        if dataclasses.is_dataclass(cls):
            names = [f.name for f in dataclasses.fields(cls)]
            optional: set[str] = set()
        else:
            names = list(hints)
            optional = set(cls.__optional_keys__)  # type: ignore[attr-defined]
        left_out = OMITTED.get(cls.__name__, set())
        if left_out == "every nullable":
            left_out = {n for n in names if _without_none(hints[n]) is not hints[n]}
        properties: dict[str, Any] = {}
        if cls is CheckVerdict:
            properties["format"] = {"type": "string", "const": VERDICT_FORMAT}
        for field_name in names:
            annotation = hints[field_name]
            if field_name in left_out:
                annotation = _without_none(annotation)
            properties[field_name] = self.schema(annotation)
        required = [n for n in properties if n not in left_out | optional]
        component: dict[str, Any] = {"type": "object", "properties": properties,
                                     "required": required, "additionalProperties": False}
        description = _description(cls)
        if description:
            component["description"] = description
        self.components[name] = component
        return name


def _without_none(tp: Any) -> Any:
    """``X | None`` → ``X`` (a field the JSON leaves out when it is None)."""
    if get_origin(tp) in (Union, types.UnionType):
        rest = tuple(a for a in get_args(tp) if a is not type(None))
        return rest[0] if len(rest) == 1 else typing.Union[rest]  # noqa: UP007
    return tp


def verdict_components() -> dict[str, dict[str, Any]]:
    """Component name → JSON Schema of the verdict (``Verdict``) and of each record in it."""
    builder = _Builder()
    builder.record(CheckVerdict)
    verdict = builder.components[VERDICT_COMPONENT]
    verdict["description"] = (
        f"The engine's verdict, format {VERDICT_FORMAT} (DEVELOPERS.md, \"Verdict format\"). "
        "Fields are only ever added within a format; a number is null where its value is not "
        "finite or not defined.")
    return builder.components
