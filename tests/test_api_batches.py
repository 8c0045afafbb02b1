"""/v1/batches: JSON and multipart submission, counts, paginated listing, cancellation.

Sources: the closed form of a parallel RLC tank with a negative conductance (natural frequencies
−G/2C ± j√(1/LC − (G/2C)²), G = 1/R + g; unstable when G < 0; any circuits text, e.g.
Nilsson & Riedel, Electric Circuits, ch. 8, from memory) gives which variants are unstable and at
what frequency; RFC 8288 (Link header, rel="next"); the Touchstone v1 specification (the file
format of the multipart upload); RFC 7578 (multipart/form-data).
"""

from __future__ import annotations

import io
import json
import math
import re

import numpy as np
import pytest

from service.runner import load_request
from tests.api_fixtures import rlc_request, run_worker, tiny_request
from tests.request_equality import assert_same_request

PROBLEM = "application/problem+json"
L_H, C_F, G_NEG_S = 1e-9, 2e-12, -3e-3
R_VALUES = (200.0, 250.0, 500.0, 1000.0)  # 1/R > 3 mS (stable) for the first two only


def _closed_form_hz(r_ohm: float) -> float:
    g = 1.0 / r_ohm + G_NEG_S
    return math.sqrt(1.0 / (L_H * C_F) - (g / (2 * C_F)) ** 2) / (2 * math.pi)


def _rlc_batch() -> dict:
    requests = [rlc_request(r) for r in R_VALUES]
    shared = {k: requests[0][k] for k in ("frequency_hz", "ports", "devices")}
    variants = [{"label": f"R={r:g}", "parameters": q["parameters"], "data": q["data"],
                 "z0_ohm": q["z0_ohm"]} for r, q in zip(R_VALUES, requests, strict=True)]
    return {"label": "tank sweep", "map": shared, "variants": variants}


def _link_next(response) -> str | None:
    match = re.match(r'^<([^>]+)>; rel="next"$', response.headers.get("Link", ""))
    return match.group(1) if match else None


def test_json_batch_runs_and_counts_by_status_and_verdict(client, auth, api_stores, fake_queue):
    batch = _rlc_batch()
    response = client.post("/v1/batches", json=batch, headers=auth)
    assert response.status_code == 202
    body = response.get_json()
    assert response.headers["Location"] == f"/v1/batches/{body['id']}"
    assert len(body["check_ids"]) == 4 and fake_queue.enqueued == body["check_ids"]
    # each stored request is the shared map merged with its variant, as the schema validated it
    for variant, check_id in zip(batch["variants"], body["check_ids"], strict=True):
        member = {k: v for k, v in variant.items() if k != "label"}
        assert_same_request(load_request(api_stores.checks.get_request(check_id)),
                            load_request({**batch["map"], **member}))
    # what the map gives every variant (its 4001 frequencies) is stored once, beside the checks
    grid = np.asarray(batch["map"]["frequency_hz"], dtype="<f8").tobytes()
    db = api_stores.checks._conn()
    assert grid in [row[0] for row in db.execute("SELECT body FROM blobs")]
    assert not any(grid in row[0] for row in db.execute("SELECT request FROM checks"))

    summary = client.get(f"/v1/batches/{body['id']}", headers=auth).get_json()
    assert summary["size"] == 4 and summary["finished"] is False
    assert summary["counts_by_status"] == {"queued": 4, "running": 0, "done": 0, "failed": 0,
                                           "cancelled": 0}
    run_worker(api_stores.checks, body["check_ids"])
    summary = client.get(f"/v1/batches/{body['id']}", headers=auth).get_json()
    assert summary["finished"] is True and summary["counts_by_status"]["done"] == 4
    assert summary["counts_by_verdict"] == {"stable": 2, "unstable": 2, "indeterminate": 0}


def test_listing_shows_the_first_offending_mode_and_filters(client, auth, api_stores):
    body = client.post("/v1/batches", json=_rlc_batch(), headers=auth).get_json()
    run_worker(api_stores.checks, body["check_ids"])
    page = client.get(f"/v1/batches/{body['id']}/checks?verdict=unstable", headers=auth)
    items = page.get_json()["items"]
    assert [i["label"] for i in items] == ["R=500", "R=1000"]
    for item, r in zip(items, (500.0, 1000.0), strict=True):
        assert item["status"] == "done" and item["unstable_count"] == 2  # one complex pair
        assert item["first_unstable_frequency_hz"] == pytest.approx(_closed_form_hz(r), rel=2e-3)
        assert item["first_unstable_node"] == "tank"
    stable = client.get(f"/v1/batches/{body['id']}/checks?verdict=stable", headers=auth)
    assert [i["first_unstable_node"] for i in stable.get_json()["items"]] == [None, None]
    queued = client.get(f"/v1/batches/{body['id']}/checks?status=queued", headers=auth)
    assert queued.get_json() == {"items": [], "next_cursor": None}


def test_cursor_pagination_with_link_next(client, auth):
    variants = [{"label": f"v{i}"} for i in range(7)]
    body = client.post("/v1/batches", json={"map": tiny_request(), "variants": variants},
                       headers=auth).get_json()
    url = f"/v1/batches/{body['id']}/checks?limit=3"
    seen, pages = [], 0
    while url:
        response = client.get(url, headers=auth)
        assert response.status_code == 200
        data = response.get_json()
        seen += [i["id"] for i in data["items"]]
        pages += 1
        url = _link_next(response)
        assert (url is None) == (data["next_cursor"] is None)
    assert seen == body["check_ids"] and pages == 3
    bad = client.get(f"/v1/batches/{body['id']}/checks?cursor=not-ours", headers=auth)
    assert bad.status_code == 400 and bad.mimetype == PROBLEM


def test_invalid_variant_names_index_label_and_field_and_stores_nothing(
        client, auth, api_stores, fake_queue):
    batch = _rlc_batch()
    batch["variants"][2]["data"]["re"] = batch["variants"][2]["data"]["re"][:-1]  # F − 1 rows
    batch["variants"][3]["wobble"] = 1
    response = client.post("/v1/batches", json=batch, headers=auth)
    problem = response.get_json()
    assert response.status_code == 422 and response.mimetype == PROBLEM
    fields = [e["field"] for e in problem["errors"]]
    # one answer names every problem: the unknown member and the other variant's bad data
    assert fields[-1] == "variants.3.wobble"
    assert [f[:len("variants.2.data")] for f in fields[:-1]] == ["variants.2.data"]
    assert problem["detail"].startswith(f"2 of {len(batch['variants'])} variants are invalid")
    del batch["variants"][3]["wobble"]
    problem = client.post("/v1/batches", json=batch, headers=auth).get_json()
    assert [e["field"][:len("variants.2.data")] for e in problem["errors"]] == ["variants.2.data"]
    assert "variant 2 ('R=500')" in problem["errors"][0]["detail"]
    assert api_stores.checks.list_batches("acme") == [] and fake_queue.enqueued == []


def test_error_in_the_shared_map_is_attributed_to_the_map(client, auth):
    batch = _rlc_batch()
    batch["map"]["devices"][0]["control"] = ["nowhere", None]
    problem = client.post("/v1/batches", json=batch, headers=auth).get_json()
    assert {e["field"] for e in problem["errors"]} == {"map.devices.0.control"}
    assert "4 of 4 variants" in problem["detail"]


def test_a_thousand_variants_in_one_batch(client, auth, api_stores):
    rng = np.random.default_rng(7)
    variants = []
    for i, g in enumerate(rng.uniform(0.01, 0.05, size=1000)):
        variants.append({"label": f"shunt-{i}", "data": {
            "re": [[[g, 0.0], [0.05, g]]] * 4, "im": [[[0.0, 0.0], [0.0, 0.0]]] * 4}})
    shared = {k: v for k, v in tiny_request().items() if k != "data"}
    response = client.post("/v1/batches", json={"map": shared, "variants": variants},
                           headers=auth)
    assert response.status_code == 202
    ids = response.get_json()["check_ids"]
    assert len(set(ids)) == 1000
    summary = client.get(f"/v1/batches/{response.get_json()['id']}", headers=auth).get_json()
    assert summary["counts_by_status"]["queued"] == 1000
    stored = load_request(api_stores.checks.get_request(ids[999]))
    data = variants[999]["data"]
    sent = np.asarray(data["re"]) + 1j * np.asarray(data["im"])
    assert np.array_equal(stored.network.values, sent)


UPLOAD_FREQUENCY_HZ = np.geomspace(1e7, 1e12, 401)


def _touchstone(r_ohm: float) -> str:
    """One-port Touchstone v1 (# Hz S RI R 50) of the RLC tank, written from its S data."""
    from workers.lumped.checkdata import to_touchstone

    request = rlc_request(r_ohm, UPLOAD_FREQUENCY_HZ)
    s = np.asarray(request["data"]["re"]) + 1j * np.asarray(request["data"]["im"])
    return to_touchstone(UPLOAD_FREQUENCY_HZ, s, z0=50.0)


def test_multipart_upload_of_touchstone_files(client, auth, api_stores):
    base = rlc_request(200.0)
    shared = {"ports": base["ports"], "devices": base["devices"]}

    files = [(io.BytesIO(_touchstone(r).encode()), f"tank-{r:g}.s1p") for r in (200.0, 250.0)]
    response = client.post(
        "/v1/batches", headers=auth, content_type="multipart/form-data",
        data={"map": json.dumps(shared), "label": "uploaded", "files": files},
    )
    assert response.status_code == 202, response.get_json()
    ids = response.get_json()["check_ids"]
    verdicts = run_worker(api_stores.checks, ids)
    # each stored request is the map plus that file, parsed (run_worker ran the engine on it)
    for check_id, r in zip(ids, (200.0, 250.0), strict=True):
        assert_same_request(load_request(api_stores.checks.get_request(check_id)),
                            load_request({**shared, "touchstone": _touchstone(r)}))
    items = client.get(f"/v1/batches/{response.get_json()['id']}/checks",
                       headers=auth).get_json()["items"]
    assert [i["label"] for i in items] == ["tank-200.s1p", "tank-250.s1p"]
    assert [i["verdict"] for i in items] == [v["verdict"] for v in verdicts]


def test_multipart_errors_name_the_file(client, auth):
    shared = {"ports": [{"name": "tank", "role": "probe"}],
              "devices": rlc_request(200.0)["devices"]}
    files = [(io.BytesIO(_touchstone(200.0).encode()), "good.s1p"),
             (io.BytesIO(b"# Hz S RI R 50\n1 2\n"), "broken.s1p")]
    problem = client.post("/v1/batches", headers=auth, content_type="multipart/form-data",
                          data={"map": json.dumps(shared), "files": files}).get_json()
    assert problem["status"] == 422
    assert problem["errors"][0]["field"].startswith("files.1.touchstone")
    assert "broken.s1p" in problem["errors"][0]["detail"]
    again = [(io.BytesIO(_touchstone(200.0).encode()), "good.s1p")]
    missing = client.post("/v1/batches", headers=auth, content_type="multipart/form-data",
                          data={"files": again}).get_json()
    assert [e["field"] for e in missing["errors"]] == ["map"]


def test_cancel_batch_and_recent_batches(client, auth, rival_auth, api_stores):
    first = client.post("/v1/batches", json=_rlc_batch(), headers=auth).get_json()
    run_worker(api_stores.checks, first["check_ids"][:1])
    response = client.delete(f"/v1/batches/{first['id']}", headers=auth)
    assert response.status_code == 200
    assert response.get_json()["counts_by_status"]["cancelled"] == 3
    assert response.get_json()["counts_by_status"]["done"] == 1
    second = client.post("/v1/batches", json=_rlc_batch(), headers=auth).get_json()
    listed = client.get("/v1/batches", headers=auth).get_json()["items"]
    assert [b["id"] for b in listed][:2] == [second["id"], first["id"]]
    assert client.get("/v1/batches", headers=rival_auth).get_json() == {"items": []}
    for path in (f"/v1/batches/{first['id']}", f"/v1/batches/{first['id']}/checks"):
        assert client.get(path, headers=rival_auth).status_code == 404
    assert client.delete(f"/v1/batches/{second['id']}", headers=rival_auth).status_code == 404
    assert client.get(f"/v1/batches/{second['id']}", headers=auth).get_json()[
        "counts_by_status"]["queued"] == 4


def test_idempotent_batch_retry(client, auth, fake_queue):
    headers = {**auth, "Idempotency-Key": "nightly-7"}
    first = client.post("/v1/batches", json=_rlc_batch(), headers=headers).get_json()
    again = client.post("/v1/batches", json=_rlc_batch(), headers=headers).get_json()
    assert first == again and len(fake_queue.enqueued) == 4


def test_batch_envelope_errors(client, auth):
    assert client.post("/v1/batches", json={"variants": []}, headers=auth).status_code == 422
    problem = client.post("/v1/batches", json={"variants": [{}], "extra": 1},
                          headers=auth).get_json()
    assert "extra" in [e["field"] for e in problem["errors"]]
    assert client.get("/v1/batches?limit=0", headers=auth).status_code == 422
    assert client.get("/v1/batches?colour=red", headers=auth).status_code == 422


def test_on_redis_an_invalid_late_variant_unqueues_the_early_ones(clock, monkeypatch):
    # On Redis the first variants are stored and queued while later ones are still validated;
    # a later invalid variant must still leave nothing behind (the service's contract: nothing
    # of a rejected batch is stored, its messages find nothing to run, the quota is untouched).
    from service.app import create_app
    from service.auth import create_token
    from tests.api_fixtures import FakeQueue, api_config
    from tests.conftest import redis_stores

    monkeypatch.setattr("workers.store.redis_backend.checks.STORE_CHUNK_CHECKS", 2)
    gen = redis_stores(clock)
    stores = next(gen)
    store = stores.checks
    try:
        queue = FakeQueue()
        client = create_app(api_config(stores, queue)).test_client()
        auth = {"Authorization": f"Bearer {create_token(stores.access, 'acme')}"}
        batch = _rlc_batch()
        batch["variants"][3]["data"]["re"] = batch["variants"][3]["data"]["re"][:-1]
        response = client.post("/v1/batches", json=batch, headers=auth)
        problem = response.get_json()
        assert response.status_code == 422 and response.mimetype == PROBLEM
        assert problem["detail"].startswith(f"1 of {len(batch['variants'])} variants")
        assert {e["field"][:len("variants.3.data")] for e in problem["errors"]} == {
            "variants.3.data"}
        assert len(queue.enqueued) == 2  # the first chunk went to the queue before variant 3
        assert [store.claim(cid, 60, 3) for cid in queue.enqueued] == [None, None]
        assert store.list_batches("acme") == [] and store.count_unfinished("acme") == 0
        del batch["variants"][3]
        accepted = client.post("/v1/batches", json=batch, headers=auth)
        assert accepted.status_code == 202
        assert queue.enqueued[2:] == accepted.get_json()["check_ids"]
    finally:
        gen.close()


def test_packed_variants_are_stored_as_the_lists_give_the_same_verdicts(
        client, auth, api_stores):
    # The same four closed-form tanks with their data packed (base64 of little-endian
    # complex128, RFC 4648): validated into the same requests, so stored as the same bytes
    # (workers.intake), and the verdicts equal those of the list form: the closed-form counts.
    from service.schemas.request import pack_array

    def stored(ids: list[str]) -> list[bytes]:
        return [api_stores.checks.get_request(cid).payload for cid in ids]

    batch = _rlc_batch()
    lists_ids = client.post("/v1/batches", json=batch, headers=auth).get_json()["check_ids"]
    lists_verdicts = run_worker(api_stores.checks, lists_ids)
    for variant in batch["variants"]:
        data = np.asarray(variant["data"]["re"]) + 1j * np.asarray(variant["data"]["im"])
        variant["data"] = pack_array(data)
    ids = client.post("/v1/batches", json=batch, headers=auth).get_json()["check_ids"]
    assert stored(ids) == stored(lists_ids)
    assert run_worker(api_stores.checks, ids) == lists_verdicts
    assert [v["verdict"] for v in lists_verdicts] == ["stable", "stable", "unstable", "unstable"]


@pytest.mark.parametrize("text", ["@@@@", "\u0080", "QUJ"])
def test_packed_variant_with_bad_base64_is_named(client, auth, api_stores, text):
    # RFC 4648 §4: only its alphabet, in complete 4-character groups; a JSON string may hold
    # anything, non-ASCII included.
    from service.schemas.request import pack_array

    batch = _rlc_batch()
    variant = batch["variants"][1]
    data = np.asarray(variant["data"]["re"]) + 1j * np.asarray(variant["data"]["im"])
    variant["data"] = {**pack_array(data), "base64": text}
    response = client.post("/v1/batches", json=batch, headers=auth)
    problem = response.get_json()
    assert response.status_code == 422 and response.mimetype == PROBLEM
    assert [e["field"] for e in problem["errors"]] == ["variants.1.data.base64"]
    assert "base64" in problem["errors"][0]["detail"]
    assert api_stores.checks.list_batches("acme") == []


@pytest.mark.parametrize(("change", "field"), [
    ({"map": {"colour": "blue"}}, "map.colour"),  # not a member BatchMap documents
    ({"map": [1]}, "map"),
    ({"label": "x" * 201}, "label"),  # maxLength 200 in the document
    ({"label": None}, "label"),  # a string, not null
    ({"variants": {"a": 1}}, "variants"),  # an array
    ({"variants": [{"label": 7}]}, "variants.0.label"),
    ({"variants": [{"label": "a", "colour": "blue"}]}, "variants.0.colour"),
    ({"variants": [3]}, "variants.0"),  # each variant is an object
])
def test_batch_fields_are_checked_as_the_openapi_document_describes_them(
        client, auth, api_stores, change, field):
    # The document's BatchRequest, BatchMap and BatchVariant (openapi/openapi.json) are the
    # contract: a body that breaks them is refused, naming the field, and nothing is stored.
    body = {"map": tiny_request(), "variants": [{"label": "a"}], **change}
    response = client.post("/v1/batches", json=body, headers=auth)
    assert response.status_code == 422 and response.mimetype == PROBLEM
    assert [e["field"] for e in response.get_json()["errors"]] == [field]
    assert api_stores.checks.list_batches("acme") == []


def test_a_map_with_the_data_is_stored_once_for_all_its_variants(client, auth, api_stores):
    # Variants that change only a device's transconductance share the map's network data: the
    # data (4001 x 1 x 1 complex128, 64 kB) is kept once beside the checks, not in each.
    base = rlc_request(200.0)
    variants = [{"label": f"gm={gm}", "devices": [{**base["devices"][0], "gm_s": gm}]}
                for gm in (-1e-3, -2e-3, -4e-3)]
    response = client.post("/v1/batches", json={"map": base, "variants": variants},
                           headers=auth)
    assert response.status_code == 202
    data = np.asarray(base["data"]["re"]) + 1j * np.asarray(base["data"]["im"])
    raw = data.astype("<c16").tobytes()
    for check_id, variant in zip(response.get_json()["check_ids"], variants, strict=True):
        stored = api_stores.checks.get_request(check_id)
        assert raw not in stored.payload and raw in stored.shared.values()
        request = load_request(stored)
        assert_same_request(request, load_request({**base, "devices": variant["devices"]}))
        assert np.array_equal(request.network.values, data)


def test_multipart_envelope_problems(client, auth):
    good = [(io.BytesIO(_touchstone(200.0).encode()), "good.s1p")]
    shared = json.dumps({"ports": [{"name": "tank", "role": "probe"}],
                         "devices": rlc_request(200.0)["devices"]})

    def post(data):
        return client.post("/v1/batches", headers=auth, content_type="multipart/form-data",
                           data=data)

    malformed = post({"map": "{", "files": good})
    assert malformed.status_code == 400 and "'map' part" in malformed.get_json()["detail"]
    unknown = post({"map": shared, "colour": "blue",
                    "files": [(io.BytesIO(_touchstone(200.0).encode()), "good.s1p")]})
    assert [e["field"] for e in unknown.get_json()["errors"]] == ["colour"]
    latin1 = post({"map": shared, "files": [(io.BytesIO("! 25 °C\n".encode("latin-1")),
                                            "latin1.s1p")]})
    # a Latin-1 comment is read (comments may be in any 8-bit encoding); the file holds no
    # option line or data, and the error names the file's Touchstone text
    assert [e["field"] for e in latin1.get_json()["errors"]] == ["files.0.touchstone"]
    assert "UTF-8" not in latin1.get_json()["errors"][0]["detail"]
    missing = post({"map": shared})
    assert [e["field"] for e in missing.get_json()["errors"]] == ["files"]


def test_a_json_batch_with_a_byte_order_mark_is_read(client, auth):
    # json.loads reads UTF-8 bytes that start with a byte order mark (RFC 8259 §8.1 lets a
    # parser ignore it); the batch is taken in as without it.
    body = "\ufeff".encode() + json.dumps({"map": tiny_request(),
                                           "variants": [{"label": "a"}]}).encode()
    response = client.post("/v1/batches", data=body, content_type="application/json",
                           headers=auth)
    assert response.status_code == 202 and len(response.get_json()["check_ids"]) == 1
