"""The binary stored form of a check request (service.store.payload).

Oracles: the MessagePack specification (https://github.com/msgpack/msgpack/blob/master/spec.md:
a map of up to 15 entries starts with 0x8N, a bin 16 object with 0xc5 and a 2-byte big-endian
length), RFC 4648 base64 as the standard library decodes it, and the request the JSON text of the
same check gives (``load_request`` of the JSON document), verdicts included.
"""

from __future__ import annotations

import base64
import json
import struct

import numpy as np

from service.runner import load_request as validated
from service.runner import run_check_json
from service.store.base import NewCheck, merge_request
from service.store.payload import binary_request, is_binary, load_request
from service.store.sqlite_store import SqliteStore
from tests.support.payloads import lists_payload, packed_payload


def test_binary_form_holds_the_bytes_base64_encodes() -> None:
    packed = packed_payload()
    binary = binary_request(packed)
    assert binary is not None
    assert binary[0] == 0x80 | len(packed)  # fixmap (spec: "fixmap stores a map ... 0x8N")
    back = load_request(binary)
    for name in ("frequency_hz", "data"):
        assert back[name]["base64"] == base64.b64decode(packed[name]["base64"])
        assert back[name]["dtype"] == packed[name]["dtype"]
        assert back[name]["shape"] == packed[name]["shape"]
    assert back["devices"][0]["gm_s"]["base64"] == base64.b64decode(
        packed["devices"][0]["gm_s"]["base64"])
    assert back["ports"] == packed["ports"]
    # 7 x 3 x 3 complex128 values, 1008 bytes: a bin 16 object (0xc5, then the length as a
    # big-endian uint16, then the bytes)
    data = back["data"]["base64"]
    assert len(data) == 1008
    at = binary.index(data)
    assert binary[at - 3] == 0xC5 and struct.unpack(">H", binary[at - 2:at])[0] == len(data)
    # a quarter smaller than the JSON text of the same request (base64: 4 characters per 3 bytes)
    assert len(binary) < 0.8 * len(json.dumps(packed))


def test_binary_form_validates_to_the_same_request_and_verdict() -> None:
    packed = packed_payload()
    from_json, from_binary = validated(packed), validated(load_request(binary_request(packed)))
    assert np.array_equal(from_json.frequency_hz, from_binary.frequency_hz)
    assert np.array_equal(from_json.network.values, from_binary.network.values)
    assert np.array_equal(from_json.devices[0].gm_s, from_binary.devices[0].gm_s)
    assert run_check_json(load_request(binary_request(packed))) == run_check_json(packed)


def test_requests_without_packed_arrays_stay_json() -> None:
    lists = lists_payload()
    assert binary_request(lists) is None
    text = json.dumps(lists).encode()
    for stored in (text, b" \n" + text, text.decode()):
        assert not is_binary(stored) and load_request(stored) == lists


def test_both_stores_keep_and_return_the_binary_form(store) -> None:
    shared = {"ports": packed_payload()["ports"]}
    member = {k: v for k, v in packed_payload().items() if k != "ports"}
    binary = binary_request(member)
    _, (cid,) = store.create_checks("acme", [NewCheck(None, label="b", request_binary=binary)],
                                    as_batch=True, shared=shared)
    got = store.get_request(cid)
    assert got == merge_request(shared, load_request(binary))
    assert run_check_json(got) == run_check_json(merge_request(shared, member))
    if isinstance(store, SqliteStore):
        (kind,) = store._conn().execute("SELECT typeof(request) FROM checks").fetchone()
        assert kind == "blob"
