"""New samples for an existing check (``POST /v1/checks/{id}/samples``, ``ballast check --add``):
the network part of a check request at new frequencies, validated against the check it extends.

The body takes the same network forms as a check request (``parameters``/``data`` with
``frequency_hz`` and ``z0_ohm``, or ``touchstone``), ``gain_off`` when the check has it, and
``gm_s`` by device name for devices whose transconductance varies with frequency. Unlike a check
request, one new frequency is enough. The merge itself is ``workers.engine.samples``.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from marshmallow import RAISE, ValidationError, fields, post_load

from service.schemas.request import (
    FloatArray,
    NetworkSchema,
    Transconductance,
    _network,
    checked_frequencies,
)
from service.schemas.submission import priority_field
from workers.engine.errors import InputError
from workers.engine.request import CheckRequest
from workers.engine.samples import AddedSamples, merge_samples
from workers.engine.verdict import Diagnostic


class SamplesSchema(NetworkSchema):
    """New frequency samples of a check's network (module docstring)."""

    class Meta:
        unknown = RAISE

    frequency_hz = FloatArray(metadata={
        "description": "the new frequencies, strictly increasing, >= 0; optional with "
                       "touchstone; one is enough"})
    gain_off = fields.Nested(NetworkSchema, metadata={
        "description": "required when the check has gain_off data: the same at the new "
                       "frequencies"})
    priority = priority_field()  # read by the API before the schema: how the new check queues
    gm_s = fields.Dict(keys=fields.String(), values=Transconductance(), metadata={
        "description": "by device name: the transconductance at the new frequencies, for "
                       "devices whose gm varies with frequency"})

    @post_load
    def _raw(self, data: dict[str, Any], **kwargs: Any) -> dict[str, Any]:
        return data


def added_samples(data: dict[str, Any], old: CheckRequest) -> AddedSamples:
    """The validated body as samples for ``old`` (raises InputError naming the field)."""
    notes: list[Diagnostic] = []
    network, file_f = _network(data, "", old.n_ports, old.options, notes)
    f = checked_frequencies(data.get("frequency_hz"), file_f, network.values.shape[0],
                            min_points=1)
    gain_off = None
    if "gain_off" in data:
        gain_off, off_f = _network(data["gain_off"], "gain_off.", old.n_ports, old.options,
                                   notes)
        if off_f is not None and (off_f.shape != f.shape or not np.allclose(off_f, f, rtol=1e-9)):
            raise InputError("gain_off.touchstone", "frequencies differ from the network's")
        if gain_off.values.shape[0] != f.size:
            raise InputError("gain_off.data", f"has {gain_off.values.shape[0]} frequency points; "
                                              f"expected {f.size}")
    names = {d.name for d in old.devices}
    gm = {}
    for name, value in (data.get("gm_s") or {}).items():
        if name not in names:
            raise InputError(f"gm_s.{name}", "names no device of the check")
        gm[name] = np.broadcast_to(np.asarray(value, dtype=complex), f.shape).copy()
    return AddedSamples(f, network, gain_off, gm, tuple(notes))


def merged_request(body: dict[str, Any], old: CheckRequest) -> CheckRequest:
    """Validate ``body`` (raises marshmallow.ValidationError naming the field) and merge it."""
    data = SamplesSchema().load(body)
    try:
        return merge_samples(old, added_samples(data, old))
    except InputError as exc:
        raise ValidationError({exc.field: [exc.message]}) from exc
