"""The Python client: configuration, Retry-After and backoff, Link headers, and real round trips
against the Flask app on a socket (SQLite store, in-process queue running the real engine).

Expected verdicts come from closed forms, not from the engine: a parallel R, L, C tank with a
negative conductance g has natural frequencies s = −G/2C ± j√(1/LC − (G/2C)²), G = 1/R + g
(the parallel RLC natural response of any circuits textbook, e.g. Nilsson & Riedel, Electric
Circuits, the chapter on second-order circuits — edition and chapter not checked, from memory),
so with R = 200 Ω it is stable for g = −3 mS and oscillates for g = −8 mS at
√(1/LC − (G/2C)²)/2π ≈ 3.557 GHz.
"""

from __future__ import annotations

import socket
import threading
import time
from pathlib import Path

import numpy as np
import pytest
import requests

from service.client import (
    ApiError,
    BallastClient,
    ClientConfig,
    ClientError,
    RetryPolicy,
    batch_progress,
    load_config,
    next_link,
)
from tests.client_live_server import live_server
from tests.support.json_requests import (
    RLC_C_F,
    RLC_L_H,
    RLC_SHORT_BAND_HZ,
    rlc_tank_frequency_hz,
    rlc_tank_request,
)
from workers.lumped.families import parallel_rlc_negative_g


@pytest.fixture
def server(tmp_path: Path):
    with live_server(tmp_path) as live:
        yield live


def client_for(live) -> BallastClient:
    return BallastClient(ClientConfig(url=live.url, token=live.token))


# --- pure helpers --------------------------------------------------------------------------------

class _Answer:
    """What urllib3's Retry reads of a response: its headers."""

    def __init__(self, headers: dict[str, str]) -> None:
        self.headers = headers


@pytest.mark.parametrize(("header", "expected"), [
    ("30", 30.0),                              # RFC 9110 §10.2.3 delay-seconds
    ("120", 60.0),                             # capped at RetryPolicy.max_retry_after_s
    ("Fri, 31 Dec 1999 23:59:59 GMT", 0.0),    # the RFC's own HTTP-date example, long past
    ("soon", None),                            # neither: back off as without a Retry-After
    (None, None),
])
def test_retry_after_reads_seconds_and_http_dates(header, expected):
    retry = RetryPolicy(max_retry_after_s=60.0).urllib3_retry()
    headers = {} if header is None else {"Retry-After": header}
    assert retry.get_retry_after(_Answer(headers)) == expected
    assert retry.new(total=1).get_retry_after(_Answer(headers)) == expected  # kept on retries


@pytest.mark.parametrize(("header", "expected"), [
    # RFC 8288 §3.5 style: several links, rel among other parameters
    ('<https://h/v1/b/x/checks?cursor=abc>; rel="next"', "https://h/v1/b/x/checks?cursor=abc"),
    ('<https://h/a>; rel="prev", <https://h/b>; title="more"; rel="next"', "https://h/b"),
    ("<https://h/a>; rel=next", "https://h/a"),
    ('<https://h/a>; rel="prev"', None),
    (None, None),
])
def test_next_link_follows_rfc8288(header, expected):
    assert next_link(header) == expected


def test_backoff_grows_exponentially_up_to_the_cap():
    # urllib3's documented backoff: factor·2^(n−1) after the n-th consecutive error (none after
    # the first), plus up to backoff_jitter, at most backoff_max.
    retry = RetryPolicy(attempts=8, base_s=0.5, cap_s=4.0).urllib3_retry()
    waits = []
    for _ in range(6):
        retry = retry.increment(method="GET", url="/v1/batches", error=ConnectionError("down"))
        waits.append(retry.get_backoff_time())
    assert waits[0] == 0.0
    for n, wait in enumerate(waits[1:], start=2):
        low = min(4.0, 0.5 * 2 ** (n - 1))
        assert low <= wait <= min(4.0, low + 0.5)
    assert waits[-1] == 4.0


def test_configuration_precedence(tmp_path: Path, monkeypatch: pytest.MonkeyPatch):
    config_file = tmp_path / "client.toml"
    config_file.write_text('url = "http://file:1/"\ntoken = "blst_file"\n', encoding="utf-8")
    monkeypatch.setenv("BALLAST_CONFIG", str(config_file))
    monkeypatch.delenv("BALLAST_URL", raising=False)
    monkeypatch.delenv("BALLAST_TOKEN", raising=False)
    assert load_config() == ClientConfig(url="http://file:1", token="blst_file")
    monkeypatch.setenv("BALLAST_URL", "http://env:2")
    monkeypatch.setenv("BALLAST_TOKEN", "blst_env")
    assert (load_config().url, load_config().token) == ("http://env:2", "blst_env")
    chosen = load_config(url="http://arg:3", token="blst_arg")
    assert (chosen.url, chosen.token) == ("http://arg:3", "blst_arg")
    config_file.write_text("url = [", encoding="utf-8")
    monkeypatch.delenv("BALLAST_URL")
    with pytest.raises(ClientError, match="cannot read client config"):
        load_config()


def test_batch_progress_counts_final_states():
    body = {"size": 5, "counts_by_status": {"queued": 1, "running": 1, "done": 2, "failed": 1,
                                            "cancelled": 0},
            "counts_by_verdict": {"stable": 1, "unstable": 1, "indeterminate": 0}}
    progress = batch_progress(body, elapsed_s=2.0)
    assert (progress.total, progress.finished, progress.rate_per_s) == (5, 3, 1.5)


# --- against the real app ------------------------------------------------------------------------

def test_batch_round_trip_gives_closed_form_verdicts(server):
    client = client_for(server)
    variants = [{"label": "g=-3mS", **rlc_tank_request(-3e-3)},
                {"label": "g=-8mS", **rlc_tank_request(-8e-3)}]
    accepted = client.submit_batch(None, variants, label="tank")
    seen = []
    batch = client.wait_batch(accepted["id"], on_progress=seen.append, poll_s=0.05)
    assert batch["finished"] and seen[-1].finished == seen[-1].total == 2
    items = {item["label"]: item for item in client.iter_batch_checks(accepted["id"])}
    assert items["g=-3mS"]["verdict"] == "stable"
    assert items["g=-8mS"]["verdict"] == "unstable"
    assert items["g=-8mS"]["unstable_count"] == 2  # one complex pair
    assert items["g=-8mS"]["first_unstable_frequency_hz"] == pytest.approx(
        rlc_tank_frequency_hz(-8e-3), rel=0.01)
    assert items["g=-8mS"]["first_unstable_node"] == "tank"


def test_pages_are_followed_through_link_headers(server):
    client = client_for(server)
    variants = [{"label": f"v{i}", **rlc_tank_request(-3e-3, np.geomspace(1e6, 1e12, 201))}
                for i in range(7)]
    accepted = client.submit_batch(None, variants)
    client.wait_batch(accepted["id"], poll_s=0.05)
    labels = [item["label"] for item in client.iter_batch_checks(accepted["id"], limit=3)]
    assert labels == [f"v{i}" for i in range(7)]  # 3 + 3 + 1, in submission order
    stable = list(client.iter_batch_checks(accepted["id"], verdict="stable", limit=2))
    assert len(stable) == 7


def test_touchstone_batch_is_multipart_and_labels_by_file_name(server, tmp_path: Path):
    """One map (g = −8 mS) shared by two files that differ in R: G = 1/R + g is +2 mS for
    R = 100 Ω (stable) and −3 mS for R = 200 Ω (unstable), by the closed form above."""
    from workers.lumped.checkdata import s_from_y, to_touchstone
    from workers.lumped.mna import port_admittance

    files = []
    for r_ohm in (100.0, 200.0):
        case = parallel_rlc_negative_g(r_ohm, RLC_L_H, RLC_C_F, -8e-3)
        y = port_admittance(case.circuit, case.port_nodes, RLC_SHORT_BAND_HZ)
        path = tmp_path / f"tank_{r_ohm:.0f}ohm.s1p"
        path.write_text(to_touchstone(RLC_SHORT_BAND_HZ, s_from_y(y)), encoding="utf-8")
        files.append(path)
    request = rlc_tank_request(-8e-3)
    mapping = {"ports": request["ports"], "devices": request["devices"]}
    client = client_for(server)
    accepted = client.submit_touchstone_batch(files, mapping)
    client.wait_batch(accepted["id"], poll_s=0.05)
    verdicts = {item["label"]: item["verdict"] for item in client.iter_batch_checks(accepted["id"])}
    assert verdicts == {"tank_100ohm.s1p": "stable", "tank_200ohm.s1p": "unstable"}


def test_single_check_cancel_and_errors(server):
    client = client_for(server)
    server.queue.hold()
    accepted = client.submit_check(rlc_tank_request(-3e-3))
    assert client.get_check(accepted["id"])["status"] == "queued"
    assert client.cancel_check(accepted["id"])["status"] == "cancelled"
    server.queue.release()
    with pytest.raises(ApiError) as missing:
        client.get_check("chk_" + "A" * 22)
    assert missing.value.status == 404 and missing.value.problem["status"] == 404
    bad = dict(rlc_tank_request(-3e-3), frequency_hz=[3.0, 2.0, 1.0] + [0.0] * 798)
    with pytest.raises(ApiError) as invalid:
        client.submit_check(bad)
    assert invalid.value.status == 422 and "frequency_hz" in str(invalid.value.problem)
    stranger = BallastClient(ClientConfig(url=server.url, token="blst_" + "x" * 43))
    with pytest.raises(ApiError) as unauthorised:
        stranger.get_check(accepted["id"])
    assert unauthorised.value.status == 401


def test_rate_limit_answer_is_retried_after_the_servers_delay(tmp_path: Path):
    """RFC 9110 §10.2.3 / RFC 6585 §4: 429 with Retry-After; the client waits at least that."""
    with live_server(tmp_path, BALLAST_RATE_LIMIT=2, BALLAST_RATE_WINDOW_S=1.0) as live:
        client = client_for(live)
        accepted = client.submit_check(rlc_tank_request(-3e-3, np.geomspace(1e6, 1e12, 101)))
        for _ in range(5):  # six requests at 2 a second: at least one is answered 429
            start = time.monotonic()
            response = client.request("GET", f"/v1/checks/{accepted['id']}")
            statuses = [h.status for h in response.raw.retries.history]
            if 429 in statuses:
                break
        assert statuses == [429] and response.json()["id"] == accepted["id"]
        assert time.monotonic() - start >= 1.0  # Retry-After >= 1 s (the window's rest)


def _hanging_up_server() -> tuple[socket.socket, list[bytes]]:
    """A TCP server that reads each request and closes the connection without an answer."""
    listener = socket.create_server(("127.0.0.1", 0))
    received: list[bytes] = []

    def serve() -> None:
        while True:
            try:
                conn, _ = listener.accept()
            except OSError:
                return
            with conn:
                received.append(conn.recv(65536))

    threading.Thread(target=serve, daemon=True).start()
    return listener, received


@pytest.mark.parametrize("method", ["GET", "POST"])
def test_lost_answers_are_retried_then_reported(method):
    listener, received = _hanging_up_server()
    url = f"http://127.0.0.1:{listener.getsockname()[1]}"
    try:
        with requests.Session() as session:
            client = BallastClient(ClientConfig(url=url, connect_timeout_s=0.5,
                                                retry=RetryPolicy(attempts=3, base_s=0.01)),
                                   session=session)
            with pytest.raises(ClientError, match=r"127\.0\.0\.1"):
                client.request(method, "/v1/batches")
    finally:
        listener.close()
    assert len(received) == 3  # three attempts
    # a POST is sent again only with the same Idempotency-Key (the server then accepts it once)
    keys = {line for r in received for line in r.split(b"\r\n") if line.startswith(b"Idempotency")}
    assert len(keys) == (1 if method == "POST" else 0)


def test_refused_connections_are_reported():
    client = BallastClient(ClientConfig(url="http://127.0.0.1:9", connect_timeout_s=0.5,
                                        retry=RetryPolicy(attempts=2, base_s=0.01)))
    with pytest.raises(ClientError, match=r"127\.0\.0\.1:9"):
        client.get_batch("bat_x")
