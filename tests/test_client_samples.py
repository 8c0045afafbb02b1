"""``BallastClient.add_samples``: the client side of POST /v1/checks/{id}/samples, against a live
server whose inline queue runs the engine (tests.client_live_server).

Oracle: the lumped circuit simulated directly on the union of the frequency sets, run through the
engine.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from service.client import BallastClient, ClientConfig
from tests.client_live_server import live_server
from tests.support.sweeps import generated, request_at
from workers.engine import run_check

CIRCUIT = generated("lna", 3)
OLD_HZ = np.geomspace(100e6, 30e9, 201)
NEW_HZ = np.geomspace(1e6, 99e6, 40)


def _done(client: BallastClient, check_id: str) -> dict:
    for _ in range(200):
        check = client.get_check(check_id)
        if check["status"] == "done":
            return check
        time.sleep(0.05)
    raise AssertionError(f"{check_id} did not finish")


def test_add_samples_returns_a_new_check_that_extends_the_old(tmp_path: Path):
    with live_server(tmp_path) as live:
        client = BallastClient(ClientConfig(url=live.url, token=live.token))
        old = client.submit_check(CIRCUIT.case.check_request(OLD_HZ))["id"]
        full = CIRCUIT.case.check_request(NEW_HZ)
        samples = {k: full[k] for k in ("frequency_hz", "parameters", "data", "z0_ohm")}
        accepted = client.add_samples(old, samples)
        assert accepted["extends"] == old and accepted["id"] != old
        merged = _done(client, accepted["id"])
    assert merged["extends"] == old
    expected = run_check(request_at(CIRCUIT, np.union1d(OLD_HZ, NEW_HZ))).to_dict()
    assert merged["verdict"]["verdict"] == expected["verdict"]
    assert merged["verdict"]["n_points"] == expected["n_points"]
    assert merged["verdict"]["unstable_count"] == expected["unstable_count"]
