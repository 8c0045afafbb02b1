"""The stored form of a validated check request (workers.intake).

Oracles: the MessagePack specification (https://github.com/msgpack/msgpack/blob/master/spec.md:
bin 8/16/32 objects start with 0xc4/0xc5/0xc6 and a 1/2/4-byte big-endian length, then the
bytes), IEEE 754 binary64 little-endian as numpy writes it (``ndarray.tobytes`` of ``<f8`` /
``<c16``), and the request that ``CheckRequestSchema`` validated: what a worker reads back must be
that request, bit for bit, and give the same verdict.
"""

from __future__ import annotations

import dataclasses
import json
import struct
import subprocess
import sys
from pathlib import Path

import msgspec
import numpy as np
import pytest

from service.runner import load_request
from tests.request_equality import assert_same_request
from tests.support.payloads import lists_payload as _lists_payload
from tests.support.payloads import packed_payload as _packed_payload
from workers.engine import run_check
from workers.intake import (
    REQUEST_ENCODING,
    SharedArrays,
    StoredRequestError,
    decode_request,
    encode_request,
)
from workers.lumped.checkdata import to_touchstone

RNG = np.random.default_rng(20270111)


def _touchstone_payload() -> dict:
    """A two-port Touchstone v1 file (S, RI) with a gain-off file, complex and default
    terminations, per-port reference impedance from the option line, and options set."""
    f = np.geomspace(1e8, 1e10, 9)
    s_on = 0.3 * (RNG.normal(size=(9, 2, 2)) + 1j * RNG.normal(size=(9, 2, 2)))
    s_off = s_on.copy()
    s_off[:, 1, 0] = 0.0
    return {
        "touchstone": to_touchstone(f, s_on, z0=50.0),
        "gain_off": {"touchstone": to_touchstone(f, s_off, z0=50.0)},
        "ports": [{"name": "in", "role": "external", "termination_ohm": {"re": 50, "im": -5}},
                  {"name": "out", "role": "external"}],
        "options": {"closure_tolerance": 0.3, "refine": False, "target_damping_ratio": 0.1,
                    "operating_band_hz": [2e9, 4e9]},
    }


def _validated() -> list:
    lists = _lists_payload()
    lists["ports"][0]["termination_ohm"] = 75.0
    lists["devices"][0]["delay_s"] = 2e-12
    return [load_request(lists), load_request(_packed_payload()),
            load_request(_touchstone_payload())]


@pytest.mark.parametrize("index", range(3))
def test_read_back_is_the_validated_request_bit_for_bit(index):
    request = _validated()[index]
    assert_same_request(decode_request(encode_request(request)), request)


def test_read_back_gives_the_verdict_of_the_validated_request():
    request = load_request(_packed_payload())
    assert run_check(decode_request(encode_request(request))).to_dict() == \
        run_check(request).to_dict()


def test_array_bytes_are_stored_as_msgpack_bin_objects():
    request = load_request(_packed_payload())
    payload = encode_request(request)
    raw = request.network.values.astype("<c16").tobytes()  # 7 x 3 x 3 x 16 = 1008 bytes
    at = payload.index(raw)
    assert payload[at - 3] == 0xC5 and struct.unpack(">H", payload[at - 2:at])[0] == len(raw)
    assert msgspec.msgpack.decode(payload)["network"]["values"] == {
        "dtype": "<c16", "shape": [7, 3, 3], "bytes": raw}


def test_a_field_missing_from_a_stored_request_reads_back_as_its_default():
    """A request stored before a field with a default existed (an optional member added later)
    still reads: here CheckOptions.refine and Device.delay_s are left out of the stored maps."""
    request = load_request(_packed_payload())
    plain = msgspec.msgpack.decode(encode_request(request))
    del plain["options"]["refine"], plain["devices"][0]["delay_s"]
    back = decode_request(msgspec.msgpack.encode(plain))
    defaults = {f.name: f.default for f in dataclasses.fields(type(request.devices[0]))}
    assert back.options.refine is True and back.devices[0].delay_s == defaults["delay_s"]


def test_shared_arrays_are_kept_once_and_referred_to():
    first, second = load_request(_lists_payload()), load_request(_lists_payload())
    same_grid = dataclasses.replace(second, frequency_hz=first.frequency_hz.copy(),
                                    network=first.network)
    shared = SharedArrays(min_bytes=64)
    one, two = encode_request(first, shared), encode_request(same_grid, shared)
    # the first hands its large arrays over, the second refers to the data instead of a copy
    data = first.network.values.tobytes()
    assert data in shared.blobs.values() and data not in one and data not in two
    assert len(two) < len(encode_request(same_grid)) - len(data) + 100
    assert_same_request(decode_request(two, shared=shared.blobs), same_grid)
    assert_same_request(decode_request(one, shared=shared.blobs), first)
    # an array that only a later request has is kept inline (the pool closes after the first)
    inline = encode_request(second, shared)
    assert_same_request(decode_request(inline, shared={}), second)
    with pytest.raises(StoredRequestError, match="missing"):
        decode_request(two, shared={})


def test_unknown_forms_and_damaged_payloads_are_named():
    payload = encode_request(load_request(_packed_payload()))
    with pytest.raises(StoredRequestError, match="does not read"):
        decode_request(payload, encoding="application/json")
    with pytest.raises(StoredRequestError, match="cannot be read"):
        decode_request(payload[: len(payload) // 2], REQUEST_ENCODING)
    plain = msgspec.msgpack.decode(payload)
    plain["network"]["values"]["shape"] = [7, 3, 4]
    with pytest.raises(StoredRequestError, match="shape"):
        decode_request(msgspec.msgpack.encode(plain))


def test_reading_a_request_loads_neither_marshmallow_nor_flask():
    code = ("import sys, workers.intake, workers.tasks; "
            "print(sorted(m for m in ('marshmallow', 'flask') if m in sys.modules))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True, cwd=Path(__file__).parent.parent)
    assert json.loads(done.stdout.replace("'", '"')) == []
