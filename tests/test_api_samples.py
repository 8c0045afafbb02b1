"""POST /v1/checks/{id}/samples: new frequency samples make a new check on the union.

Oracle: the lumped simulator sampled directly on the union of the frequency sets (the port data
at a frequency do not depend on the other frequencies), run through the engine itself.
"""

from __future__ import annotations

import numpy as np

from tests.api_fixtures import run_worker
from tests.support.sweeps import generated, request_at
from workers.engine import run_check
from workers.lumped.checkdata import to_touchstone
from workers.lumped.mna import port_admittance

CIRCUIT = generated("lna", 3)
OLD_HZ = np.geomspace(100e6, 30e9, 201)
NEW_HZ = np.geomspace(1e6, 99e6, 40)


def _request(f: np.ndarray) -> dict:
    return CIRCUIT.case.check_request(f)


def _samples(f: np.ndarray) -> dict:
    full = _request(f)
    return {key: full[key] for key in ("frequency_hz", "parameters", "data", "z0_ohm")}


def _submit(client, auth) -> str:
    response = client.post("/v1/checks", headers=auth, json=_request(OLD_HZ))
    assert response.status_code == 202
    return response.get_json()["id"]


def test_samples_make_a_new_check_on_the_union(client, auth, api_stores):
    old_id = _submit(client, auth)
    response = client.post(f"/v1/checks/{old_id}/samples", headers=auth, json=_samples(NEW_HZ))
    assert response.status_code == 202, response.get_json()
    body = response.get_json()
    assert body["extends"] == old_id and body["id"] != old_id
    assert response.headers["Location"].endswith(body["id"])
    assert client.get(f"/v1/checks/{body['id']}", headers=auth).get_json()["extends"] == old_id
    assert client.get(f"/v1/checks/{old_id}", headers=auth).get_json()["extends"] is None
    merged, old = run_worker(api_stores.checks, [body["id"], old_id])
    # JSON lists carry binary64 values exactly (shortest round-trip text), so the oracle is the
    # engine on the circuit sampled on the union, and the old check is what it was
    assert merged == run_check(request_at(CIRCUIT, np.union1d(OLD_HZ, NEW_HZ))).to_dict()
    assert old == run_check(request_at(CIRCUIT, OLD_HZ)).to_dict()
    assert merged["n_points"] == OLD_HZ.size + NEW_HZ.size


def test_touchstone_samples_are_taken_too(client, auth, api_stores):
    old_id = _submit(client, auth)
    nodes = CIRCUIT.case.port_nodes
    from workers.lumped.checkdata import s_from_y

    s = s_from_y(port_admittance(CIRCUIT.case.circuit, nodes, NEW_HZ), 50.0)
    text = to_touchstone(NEW_HZ, s, 50.0, significant_digits=17)
    response = client.post(f"/v1/checks/{old_id}/samples", headers=auth,
                           json={"touchstone": text})
    assert response.status_code == 202, response.get_json()
    (verdict,) = run_worker(api_stores.checks, [response.get_json()["id"]])
    assert verdict["n_points"] == OLD_HZ.size + NEW_HZ.size


def test_a_repeated_frequency_that_agrees_is_merged_once(client, auth, api_stores):
    old_id = _submit(client, auth)
    both = np.concatenate([NEW_HZ, OLD_HZ[10:12]])
    response = client.post(f"/v1/checks/{old_id}/samples", headers=auth, json=_samples(both))
    assert response.status_code == 202
    (verdict,) = run_worker(api_stores.checks, [response.get_json()["id"]])
    assert verdict["n_points"] == OLD_HZ.size + NEW_HZ.size


def test_a_repeated_frequency_that_disagrees_is_a_422_naming_it(client, auth):
    old_id = _submit(client, auth)
    body = _samples(OLD_HZ[10:12])
    body["data"]["re"][1][0][0] += 0.01
    problem = client.post(f"/v1/checks/{old_id}/samples", headers=auth, json=body).get_json()
    assert problem["status"] == 422
    (error,) = problem["errors"]
    assert error["field"] == "frequency_hz" and f"{OLD_HZ[11]:.12g} Hz" in error["detail"]


def test_wrong_port_count_and_unknown_members_are_named(client, auth):
    old_id = _submit(client, auth)
    body = _samples(NEW_HZ)
    body["data"] = {"re": [[[0.0]]] * NEW_HZ.size, "im": [[[0.0]]] * NEW_HZ.size}
    problem = client.post(f"/v1/checks/{old_id}/samples", headers=auth, json=body).get_json()
    assert problem["status"] == 422 and problem["errors"][0]["field"] == "data"
    extra = {**_samples(NEW_HZ), "ports": []}
    problem = client.post(f"/v1/checks/{old_id}/samples", headers=auth, json=extra).get_json()
    assert problem["status"] == 422 and problem["errors"][0]["field"] == "ports"


def test_another_tenants_check_is_not_found(client, auth, rival_auth):
    old_id = _submit(client, auth)
    response = client.post(f"/v1/checks/{old_id}/samples", headers=rival_auth,
                           json=_samples(NEW_HZ))
    assert response.status_code == 404
    missing = client.post("/v1/checks/chk_doesnotexist/samples", headers=auth,
                          json=_samples(NEW_HZ))
    assert missing.status_code == 404


def test_a_retried_post_with_its_idempotency_key_gives_the_same_check(client, auth):
    old_id = _submit(client, auth)
    headers = {**auth, "Idempotency-Key": "more-points-1"}
    first = client.post(f"/v1/checks/{old_id}/samples", headers=headers, json=_samples(NEW_HZ))
    again = client.post(f"/v1/checks/{old_id}/samples", headers=headers, json=_samples(NEW_HZ))
    assert first.status_code == again.status_code == 202
    assert first.get_json()["id"] == again.get_json()["id"]
