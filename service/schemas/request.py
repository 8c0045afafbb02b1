"""The check request: validated once here, at the boundary, into an engine ``CheckRequest``.

The same schema serves the HTTP API, batch variants and the ``ballast check`` command. Numeric
arrays are read with numpy in one step (no per-element marshmallow fields) so that large requests
validate quickly; every error names its field (``data.re``, ``devices.1.control`` …).
"""

from __future__ import annotations

import binascii
import math
from base64 import b64decode, b64encode
from typing import Any

import numpy as np
from marshmallow import (
    RAISE,
    Schema,
    ValidationError,
    fields,
    post_load,
    validate,
    validates,
    validates_schema,
)

from workers.engine.errors import InputError, TouchstoneError
from workers.engine.request import (
    MAX_POINTS,
    MAX_PORTS,
    CheckOptions,
    CheckRequest,
    Device,
    Network,
    Port,
)
from workers.engine.touchstone import parse_touchstone
from workers.engine.verdict import Diagnostic

_COMPLEX_DOC = {
    "oneOf": [
        {"type": "number"},
        {"type": "object", "required": ["re", "im"],
         "properties": {"re": {"type": "number"}, "im": {"type": "number"}},
         "additionalProperties": False},
    ]
}


_NOT_FINITE = "must contain only finite numbers (no NaN or infinity)"


def _finite(values: np.ndarray, name: str) -> np.ndarray:
    if not np.isfinite(values).all():
        raise ValidationError({name: [_NOT_FINITE]})
    return values


PACKED_KEYS = frozenset({"dtype", "shape", "base64"})
PACKED_DTYPES = {"float64": np.dtype("<f8"), "complex128": np.dtype("<c16")}


def _packed_doc(dtype: str, ndim: int) -> dict[str, Any]:
    return {
        "type": "object", "required": sorted(PACKED_KEYS), "additionalProperties": False,
        "description": f"packed array: IEEE 754 {dtype}, little-endian, row-major (C order), "
                       "base64 (RFC 4648 section 4)",
        "properties": {
            "dtype": {"type": "string", "enum": [dtype]},
            "shape": {"type": "array", "items": {"type": "integer", "minimum": 0},
                      "minItems": ndim, "maxItems": ndim},
            "base64": {"type": "string"},
        },
    }


def is_packed(value: Any) -> bool:
    """Whether ``value`` is a packed array object (``{"dtype", "shape", "base64"}``)."""
    return isinstance(value, dict) and set(value) == PACKED_KEYS


def unpack_array(value: dict[str, Any], dtype: str, ndim: int) -> np.ndarray:
    """A packed array → ndarray: ``base64`` holds the ``dtype`` values of an array of ``shape``,
    little-endian, row-major; errors name the member (``base64``, ``shape``, ``dtype``)."""
    if value["dtype"] != dtype:
        raise ValidationError({"dtype": [f'must be "{dtype}" here']})
    shape = value["shape"]
    if not (isinstance(shape, list) and len(shape) == ndim and all(
            isinstance(n, int) and not isinstance(n, bool) and n >= 0 for n in shape)):
        raise ValidationError({"shape": [f"must be a list of {ndim} non-negative integers"]})
    text = value["base64"]
    if isinstance(text, bytes):  # decoded already while the JSON was read (request_reader)
        raw = text
    elif not isinstance(text, str):
        raise ValidationError({"base64": ["must be a string"]})
    else:
        try:
            raw = b64decode(text, validate=True)
        except (binascii.Error, ValueError) as exc:
            raise ValidationError({"base64": [f"is not base64 (RFC 4648): {exc}"]}) from exc
    item = PACKED_DTYPES[dtype].itemsize
    expected = math.prod(shape) * item  # exact: numpy's int64 product could wrap to a match
    if len(raw) != expected:
        raise ValidationError({"base64": [
            f"holds {len(raw)} bytes; shape {shape} of {dtype} needs {expected}"]})
    values = np.frombuffer(raw, dtype=PACKED_DTYPES[dtype]).reshape(shape)
    if not np.isfinite(values).all():
        bad = int(np.flatnonzero(~np.isfinite(values.reshape(-1)))[0])
        raise ValidationError({"base64": [
            f"must hold only finite numbers (value {bad} in row-major order is not)"]})
    return values.astype(values.dtype.newbyteorder("="), copy=False)  # a view on little-endian


def pack_array(values: np.ndarray) -> dict[str, Any]:
    """An array as a packed array object: float64 for real, complex128 for complex values."""
    name = "complex128" if np.iscomplexobj(values) else "float64"
    data = np.ascontiguousarray(values, dtype=PACKED_DTYPES[name])
    return {"dtype": name, "shape": list(data.shape), "base64": b64encode(data).decode("ascii")}


def _as_float_array(raw: Any, name: str, ndim: int) -> np.ndarray:
    try:
        values = np.asarray(raw, dtype=float)
    except OverflowError as exc:  # an integer beyond the largest float
        raise ValidationError({name: [_NOT_FINITE]}) from exc
    except (TypeError, ValueError) as exc:
        raise ValidationError(
            {name: [f"must be a {ndim}-dimensional array of numbers with equal-length rows"]}
        ) from exc
    if values.ndim != ndim:
        raise ValidationError(
            {name: [f"must be a {ndim}-dimensional array of numbers (got {values.ndim})"]})
    return _finite(values, name)


class ComplexArray(fields.Field):
    """``{"re": [...], "im": [...]}`` of equal shape, or a packed complex128 array
    (``{"dtype", "shape", "base64"}``) → complex ndarray (shape checked later)."""

    def __init__(self, ndim: int, **kwargs: Any) -> None:
        self.ndim = ndim
        nested: dict[str, Any] = {"type": "number"}
        for _ in range(ndim):
            nested = {"type": "array", "items": nested}
        kwargs.setdefault("metadata", {}).update({"oneOf": [
            {"type": "object", "required": ["re", "im"], "additionalProperties": False,
             "properties": {"re": nested, "im": nested}},
            _packed_doc("complex128", ndim),
        ]})
        super().__init__(**kwargs)

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> np.ndarray:
        if is_packed(value):
            return unpack_array(value, "complex128", self.ndim)
        if not isinstance(value, dict) or set(value) != {"re", "im"}:
            raise ValidationError('must be an object with exactly the keys "re" and "im", or a '
                                  'packed array with "dtype", "shape" and "base64"')
        re = _as_float_array(value["re"], "re", self.ndim)
        im = _as_float_array(value["im"], "im", self.ndim)
        if re.shape != im.shape:
            raise ValidationError(f"re has shape {re.shape} but im has shape {im.shape}")
        values = np.empty(re.shape, dtype=complex)  # re + 1j * im without two temporaries
        values.real, values.imag = re, im
        return values


class FloatArray(fields.Field):
    """A list of finite numbers, read by numpy in one step, or a packed float64 array
    (``{"dtype", "shape", "base64"}``) → float ndarray."""

    def __init__(self, **kwargs: Any) -> None:
        kwargs.setdefault("metadata", {}).update({"oneOf": [
            {"type": "array", "items": {"type": "number"}}, _packed_doc("float64", 1)]})
        super().__init__(**kwargs)

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> np.ndarray:
        if is_packed(value):
            return unpack_array(value, "float64", 1)
        if not isinstance(value, list) or any(isinstance(v, bool | str) for v in value):
            raise ValidationError("must be an array of numbers")
        try:
            values = np.asarray(value, dtype=float)
        except OverflowError as exc:  # an integer beyond the largest float
            raise ValidationError(_NOT_FINITE) from exc
        except (TypeError, ValueError) as exc:
            raise ValidationError("must be an array of numbers") from exc
        if values.ndim != 1:
            raise ValidationError("must be a flat array of numbers")
        if not np.isfinite(values).all():
            bad = int(np.flatnonzero(~np.isfinite(values))[0])
            raise ValidationError(f"must contain only finite numbers (point {bad} is not)")
        return values


class ComplexNumber(fields.Field):
    """A real number or ``{"re": x, "im": y}``."""

    def __init__(self, **kwargs: Any) -> None:
        kwargs.setdefault("metadata", {}).update(_COMPLEX_DOC)
        super().__init__(**kwargs)

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> complex:
        if isinstance(value, bool):
            raise ValidationError("must be a number or {re, im}")
        try:
            if isinstance(value, int | float):
                number = complex(value)
            elif isinstance(value, dict) and set(value) == {"re", "im"} and all(
                    isinstance(value[k], int | float) and not isinstance(value[k], bool)
                    for k in ("re", "im")):
                number = complex(value["re"], value["im"])
            else:
                raise ValidationError(
                    'must be a number or an object {"re": number, "im": number}')
        except OverflowError as exc:  # an integer beyond the largest float
            raise ValidationError("must be finite") from exc
        if not np.isfinite(number):
            raise ValidationError("must be finite")
        return number


class Transconductance(fields.Field):
    """gm: a number, ``{re, im}``, or per-frequency ``{"re": [F], "im": [F]}``."""

    def __init__(self, **kwargs: Any) -> None:
        kwargs.setdefault("metadata", {}).update({"oneOf": [
            *_COMPLEX_DOC["oneOf"],
            {"type": "object", "required": ["re", "im"], "properties": {
                "re": {"type": "array", "items": {"type": "number"}},
                "im": {"type": "array", "items": {"type": "number"}}}},
            _packed_doc("complex128", 1),
        ]})
        super().__init__(**kwargs)

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any
                     ) -> complex | np.ndarray:
        if is_packed(value) or (isinstance(value, dict) and isinstance(value.get("re"), list)):
            return ComplexArray(1)._deserialize(value, attr, data)
        return ComplexNumber()._deserialize(value, attr, data)


class NetworkSchema(Schema):
    """Network data: arrays (S or Y) or a Touchstone text (S, Y or Z)."""

    class Meta:
        unknown = RAISE

    parameters = fields.String(validate=validate.OneOf(["S", "Y"]),
                               metadata={"description": "S or Y (with data)"})
    data = ComplexArray(3, metadata={"description": "[F][N][N] real and imaginary parts"})
    z0_ohm = fields.Raw(metadata={
        "description": "reference impedance for S: one positive number or one per port",
        "oneOf": [{"type": "number"}, {"type": "array", "items": {"type": "number"}}]})
    touchstone = fields.String(metadata={"description": "Touchstone v1 or v2 text"})

    @validates_schema
    def _one_source(self, data: dict[str, Any], **kwargs: Any) -> None:
        if "touchstone" in data:
            extra = {"parameters", "data", "z0_ohm"} & set(data)
            if extra:
                raise ValidationError(
                    "give either touchstone or parameters/data, not both "
                    f"({', '.join(sorted(extra))})",
                    "touchstone")
            return
        for name in ("parameters", "data"):
            if name not in data:
                raise ValidationError("missing: give parameters and data, or touchstone", name)
        if data["parameters"] != "S" and "z0_ohm" in data:
            raise ValidationError("z0_ohm applies to S data only", "z0_ohm")


class PortSchema(Schema):
    class Meta:
        unknown = RAISE

    name = fields.String(required=True, validate=validate.Length(min=1, max=64))
    role = fields.String(required=True, validate=validate.OneOf(["external", "probe"]))
    termination_ohm = ComplexNumber(metadata={"description": "external ports only; default z0"})


class DeviceSchema(Schema):
    class Meta:
        unknown = RAISE

    name = fields.String(required=True, validate=validate.Length(min=1, max=64))
    gm_s = Transconductance(required=True)
    delay_s = fields.Float(load_default=0.0, allow_nan=False,
                           validate=validate.Range(min=0.0, max=1e-6))
    fmax_hz = fields.Float(load_default=None, allow_none=True, allow_nan=False,
                           validate=validate.Range(min=0.0, min_inclusive=False, max=1e15),
                           metadata={"description": "the frequency above which this device has "
                                     "no power gain (Mason's U < 1), as the flow states it; when "
                                     "every device states one and the band reaches the largest, "
                                     "the top band edge counts as settled on that statement"})
    control = fields.List(fields.String(allow_none=True), required=True,
                          validate=validate.Length(equal=2))
    output = fields.List(fields.String(allow_none=True), required=True,
                         validate=validate.Length(equal=2))


class OptionsSchema(Schema):
    class Meta:
        unknown = RAISE

    closure_tolerance = fields.Float(validate=validate.Range(min=1e-6, max=1.0))
    phase_step_limit_deg = fields.Float(validate=validate.Range(min=1.0, max=179.0))
    consistency_tolerance = fields.Float(validate=validate.Range(min=0.0, max=1.0))
    refine = fields.Boolean()
    reference_from_comments = fields.Boolean(metadata={
        "description": "Touchstone S data: take per-port reference impedances that only comment "
                       "lines name ('! Port Impedance ...'); reported in the verdict's "
                       "diagnostics (touchstone_comment_references)"})

    target_damping_ratio = fields.Float(
        validate=validate.Range(min=0.0, max=1.0, min_inclusive=False), allow_nan=False,
        metadata={"description": "damping ratio ζ = −σ/|s| that stabiliser suggestions must give "
                                 "the least-damped natural frequency in the band; a stable check "
                                 "whose least-damped pair is below it gets suggestions too"})
    operating_band_hz = fields.List(
        fields.Float(allow_nan=False, validate=validate.Range(min=0.0, max=1e15)),
        allow_none=True, validate=validate.Length(equal=2),
        metadata={"description": "[low, high] where the amplifier is used: suggestions then "
                                 "carry their cost there (change of the external two-port's "
                                 "MSG/MAG and |S21|, dB) and are ranked by it"})

    @validates("operating_band_hz")
    def _band(self, value: list[float] | None, **kwargs: Any) -> None:
        if value is not None and len(value) == 2 and not value[0] < value[1]:
            raise ValidationError("the band's low end must be below its high end")

    @post_load
    def _options(self, data: dict[str, Any], **kwargs: Any) -> CheckOptions:
        if data.get("operating_band_hz") is not None:
            data["operating_band_hz"] = tuple(data["operating_band_hz"])
        return CheckOptions(**data)


class CheckRequestSchema(NetworkSchema):
    """One check request (see DEVELOPERS.md, "Check request")."""

    frequency_hz = FloatArray(metadata={
        "description": "strictly increasing, >= 0; optional with touchstone"})
    ports = fields.List(fields.Nested(PortSchema), required=True,
                        validate=validate.Length(min=1, max=MAX_PORTS))
    devices = fields.List(fields.Nested(DeviceSchema), load_default=list)
    gain_off = fields.Nested(NetworkSchema, metadata={
        "description": "the same network with every transconductance set to zero"})
    options = fields.Nested(OptionsSchema, load_default=CheckOptions)

    @post_load
    def _build(self, data: dict[str, Any], **kwargs: Any) -> CheckRequest:
        try:
            return build_request(data)
        except InputError as exc:
            raise ValidationError(exc.message, exc.field) from exc


def _network(raw: dict[str, Any], prefix: str, n_ports: int, options: CheckOptions,
             notes: list[Diagnostic]) -> tuple[Network, np.ndarray | None]:
    """The network and, for Touchstone, its own frequencies; the reader's notes go to ``notes``."""
    if "touchstone" in raw:
        try:
            parsed = parse_touchstone(raw["touchstone"],
                                      reference_from_comments=options.reference_from_comments)
        except TouchstoneError as exc:
            field = exc.field if exc.field != "touchstone" else f"{prefix}touchstone"
            raise InputError(field, exc.message) from exc
        if parsed.nports != n_ports:
            raise InputError(f"{prefix}touchstone",
                             f"has {parsed.nports} ports but ports lists {n_ports}")
        notes.extend(Diagnostic(note.code, note.severity, f"{prefix}touchstone: {note.message}",
                                {**note.details, "field": f"{prefix}touchstone"})
                     for note in parsed.notes)
        return Network(parsed.parameter, parsed.values, np.asarray(parsed.z0_ohm, float)), \
            parsed.frequency_hz
    values = raw["data"]
    if values.shape[1:] != (n_ports, n_ports):
        raise InputError(f"{prefix}data", f"has matrices of shape {values.shape[1:]} but ports "
                                          f"lists {n_ports} ports")
    try:
        z0 = np.asarray(raw.get("z0_ohm", 50.0), dtype=float) \
            if _numeric(raw.get("z0_ohm", 50.0)) else None
    except OverflowError:  # an integer beyond the largest float
        raise InputError(f"{prefix}z0_ohm", "must be positive and finite") from None
    if z0 is None or z0.ndim > 1 or (z0.ndim == 1 and z0.size != n_ports):
        raise InputError(f"{prefix}z0_ohm", f"must be one positive number or {n_ports} of them")
    if not (np.isfinite(z0).all() and (z0 > 0).all()):
        raise InputError(f"{prefix}z0_ohm", "must be positive and finite")
    return Network(raw["parameters"], values, np.broadcast_to(z0, (n_ports,)).copy()), None


def _numeric(value: Any) -> bool:
    items = value if isinstance(value, list) else [value]
    return bool(items) and all(isinstance(v, int | float) and not isinstance(v, bool)
                               for v in items)


def checked_frequencies(given: np.ndarray | None, from_file: np.ndarray | None, n_data: int,
                        min_points: int = 3) -> np.ndarray:
    """The frequencies of a network part (``frequency_hz``, or the Touchstone file's): at least
    ``min_points`` (3 for a check, 1 for new samples), finite, >= 0, strictly increasing, as
    many as the data's points."""
    if given is None and from_file is None:
        raise InputError("frequency_hz", "is required with array data")
    f = np.asarray(given if given is not None else from_file, dtype=float)
    if from_file is not None and given is not None and (
            f.shape != from_file.shape or not np.allclose(f, from_file, rtol=1e-9)):
        raise InputError("frequency_hz", "differs from the Touchstone file's frequencies")
    if f.size < min_points:
        raise InputError("frequency_hz", f"needs at least {min_points} point"
                         f"{'s' if min_points != 1 else ''} (got {f.size})")
    if f.size > MAX_POINTS:
        raise InputError("frequency_hz", f"has {f.size} points; the limit is {MAX_POINTS}")
    if not np.isfinite(f).all() or (f < 0).any():
        raise InputError("frequency_hz", "must be finite and >= 0")
    if (np.diff(f) <= 0).any():
        i = int(np.argmax(np.diff(f) <= 0))
        raise InputError("frequency_hz", f"must be strictly increasing (point {i + 1} is not)")
    if n_data != f.size:
        raise InputError("data", f"has {n_data} frequency points but frequency_hz has {f.size}")
    return f


def _terminal(name: str | None, index: dict[str, int], field: str) -> int | None:
    if name is None:
        return None
    if name not in index:
        raise InputError(field, f"names port {name!r}, which is not in ports (every device "
                                "terminal must be a port or null for ground)")
    return index[name]


def build_request(data: dict[str, Any]) -> CheckRequest:
    """Semantic checks across fields; raises InputError naming the field."""
    ports = data["ports"]
    index: dict[str, int] = {}
    for k, p in enumerate(ports):
        if p["name"] in index:
            raise InputError(f"ports.{k}.name", f"duplicate port name {p['name']!r}")
        index[p["name"]] = k
        if p["role"] == "probe" and "termination_ohm" in p:
            raise InputError(f"ports.{k}.termination_ohm", "probe ports stay open; only external "
                                                           "ports take a termination")
        if "termination_ohm" in p and p["termination_ohm"] == 0:
            raise InputError(f"ports.{k}.termination_ohm", "must not be zero")
    n = len(ports)
    notes: list[Diagnostic] = []
    network, file_f = _network(data, "", n, data["options"], notes)
    f = checked_frequencies(data.get("frequency_hz"), file_f, network.values.shape[0])
    gain_off = None
    if "gain_off" in data:
        gain_off, off_f = _network(data["gain_off"], "gain_off.", n, data["options"], notes)
        if off_f is not None and (off_f.shape != f.shape or not np.allclose(off_f, f, rtol=1e-9)):
            raise InputError("gain_off.touchstone", "frequencies differ from the network's")
        if gain_off.values.shape[0] != f.size:
            raise InputError("gain_off.data", f"has {gain_off.values.shape[0]} frequency points; "
                                              f"expected {f.size}")
    devices = []
    names: set[str] = set()
    for d, raw in enumerate(data["devices"]):
        if raw["name"] in names:
            raise InputError(f"devices.{d}.name", f"duplicate device name {raw['name']!r}")
        names.add(raw["name"])
        gm = raw["gm_s"]
        if isinstance(gm, np.ndarray):
            if gm.shape != f.shape:
                raise InputError(f"devices.{d}.gm_s",
                                 f"has {gm.size} values; expected one per frequency ({f.size})")
        gm = np.broadcast_to(np.asarray(gm, dtype=complex), f.shape).copy()
        control = tuple(_terminal(t, index, f"devices.{d}.control") for t in raw["control"])
        output = tuple(_terminal(t, index, f"devices.{d}.output") for t in raw["output"])
        if control[0] == control[1]:
            raise InputError(f"devices.{d}.control", "the two terminals must differ")
        if output[0] == output[1]:
            raise InputError(f"devices.{d}.output", "the two terminals must differ")
        fmax = raw.get("fmax_hz")
        devices.append(Device(raw["name"], gm, control, output, float(raw["delay_s"]),
                              None if fmax is None else float(fmax)))
    if not devices and gain_off is None:
        raise InputError("devices", "give the devices, or gain_off data, or both: the check "
                                    "needs to know the circuit with its gain switched off")
    port_objs = tuple(Port(p["name"], p["role"], p.get("termination_ohm")) for p in ports)
    return CheckRequest(f, network, port_objs, tuple(devices), gain_off, data["options"],
                        input_diagnostics=tuple(notes))
