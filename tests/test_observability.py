"""Metrics and logs: ``/metrics`` for the operators' token only; counters that add up across two
gunicorn processes (prometheus_client's multiprocess mode: each process writes its own files,
``MultiProcessCollector`` sums them, per its documentation); a request id that travels from the
HTTP request into the worker's log line; no token in any log.

The exposition is read with prometheus_client's own text parser
(``prometheus_client.parser.text_string_to_metric_families``).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import threading
from pathlib import Path

import pytest
import requests

from service.app import create_app
from service.auth import create_token
from tests.api_fixtures import FakeQueue, api_config, sqlite_file_stores, tiny_request
from tests.support.queue_harness import (
    REDIS_SERVER,
    RedisServer,
    Worker,
    free_port,
    wait_until,
    worker_env,
)
from tests.support.tenant_load import samples
from workers.celery_app import make_app
from workers.queue import publish
from workers.runtime_config import load_config
from workers.store import open_stores

METRICS_TOKEN = "operators-only-9f3c2b"


def test_metrics_are_for_the_operators_token_only(api_stores, fake_queue, auth):
    closed = create_app(api_config(api_stores, fake_queue)).test_client()
    assert closed.get("/metrics", headers=auth).status_code == 404  # no operator token set
    client = create_app(api_config(api_stores, fake_queue,
                                   BALLAST_METRICS_TOKEN=METRICS_TOKEN)).test_client()
    assert client.get("/metrics").status_code == 401
    assert client.get("/metrics", headers={"Authorization": "Bearer nope"}).status_code == 401
    assert client.get("/metrics", headers=auth).status_code == 403  # a tenant's token
    client.post("/v1/checks", json=tiny_request(), headers=auth)
    answer = client.get("/metrics", headers={"Authorization": f"Bearer {METRICS_TOKEN}"})
    assert answer.status_code == 200 and answer.mimetype == "text/plain"
    got = samples(answer.get_data(as_text=True))
    assert got[("ballast_checks_unfinished", (("tenant", "acme"),))] == 1.0
    assert got[("ballast_queue_depth", (("tenant", "acme"),))] == 0.0  # the fake queue's


def test_the_request_id_is_answered_and_made_when_missing(client, auth):
    given = client.post("/v1/checks", json=tiny_request(),
                        headers={**auth, "X-Request-ID": "ci-run-42.step-3"})
    assert given.headers["X-Request-ID"] == "ci-run-42.step-3"
    made = client.get("/healthz", headers={"X-Request-ID": "bad id with spaces"})
    assert made.headers["X-Request-ID"].startswith("req_")


@pytest.fixture
def two_process_api(tmp_path: Path):
    store_path = tmp_path / "store.sqlite3"
    setup = sqlite_file_stores(store_path)
    token = create_token(setup.access, "acme")
    setup.close()
    port = free_port()
    env = {k: v for k, v in os.environ.items()
           if not k.startswith(("BALLAST_", "PROMETHEUS_"))}
    env.update({"BALLAST_DATA_DIR": str(tmp_path / "data"),
                "BALLAST_STORE_URL": f"sqlite:///{store_path}",
                "BALLAST_METRICS_DIR": str(tmp_path / "metrics"),
                "BALLAST_METRICS_TOKEN": METRICS_TOKEN, "BALLAST_RATE_LIMIT": "100000"})
    log = (tmp_path / "api.log").open("w")
    proc = subprocess.Popen(
        [sys.executable, "-m", "gunicorn", "-c", "python:service.gunicorn_conf", "--bind",
         f"127.0.0.1:{port}", "--workers", "2", "--threads", "2", "service.app:create_app()"],
        env=env, stdout=log, stderr=subprocess.STDOUT)
    base = f"http://127.0.0.1:{port}"

    def healthy() -> bool:
        try:
            return requests.get(base + "/healthz", timeout=2).status_code == 200
        except requests.RequestException:
            return False

    try:
        wait_until(healthy, 60, "gunicorn to answer")
        yield base, token, tmp_path
    finally:
        proc.terminate()
        proc.wait(timeout=30)
        log.close()


def test_counters_add_up_across_two_gunicorn_processes(two_process_api):
    base, token, tmp_path = two_process_api
    auth = {"Authorization": f"Bearer {token}"}
    statuses: list[int] = []

    def send(n: int) -> None:
        for _ in range(n):  # a new connection each time: either process may answer
            statuses.append(requests.post(base + "/v1/checks", json=tiny_request(),
                                          headers=auth, timeout=30).status_code)
    senders = [threading.Thread(target=send, args=(10,)) for _ in range(4)]
    for thread in senders:
        thread.start()
    for thread in senders:
        thread.join()
    urgent = requests.post(base + "/v1/checks", json={**tiny_request(), "priority": "urgent"},
                           headers=auth, timeout=30)
    assert statuses == [202] * 40 and urgent.status_code == 202
    pids = {p.name.split("_")[-1] for p in (tmp_path / "metrics").glob("counter_*.db")}
    assert len(pids) == 2, pids  # both processes counted some
    text = requests.get(base + "/metrics", timeout=30,
                        headers={"Authorization": f"Bearer {METRICS_TOKEN}"}).text
    got = samples(text)
    assert got[("ballast_checks_submitted_total", (("priority", "normal"),))] == 40.0
    assert got[("ballast_checks_submitted_total", (("priority", "urgent"),))] == 1.0
    assert got[("ballast_checks_unfinished", (("tenant", "acme"),))] == 41.0
    log = (tmp_path / "api.log").read_text()
    assert token not in log and METRICS_TOKEN not in log


@pytest.mark.integration
@pytest.mark.skipif(REDIS_SERVER is None, reason="needs redis-server")
def test_the_request_id_reaches_the_worker_log_line(tmp_path: Path):
    server = RedisServer(tmp_path / "redis")
    server.start()
    env = worker_env(server.url, tmp_path / "data")
    stores = open_stores(server.url)
    token = create_token(stores.access, "acme")
    broker = make_app(load_config(env))
    worker = Worker(tmp_path, env).start()
    try:
        app = create_app(api_config(
            stores, FakeQueue(),
            BALLAST_ENQUEUE=lambda ids, **route: publish(broker, ids, **route)))
        answer = app.test_client().post(
            "/v1/checks", json=tiny_request(),
            headers={"Authorization": f"Bearer {token}", "X-Request-ID": "trace-7f00ba"})
        assert answer.status_code == 202
        check_id = answer.get_json()["id"]
        wait_until(lambda: stores.checks.get_check_any(check_id).status == "done", 60,
                   "the worker to run the check")
        wait_until(lambda: '"check done"' in worker.log_text(), 15, "the worker's log line")
        lines = [json.loads(line) for line in worker.log_text().splitlines()
                 if line.startswith("{") and check_id in line]
        done = [line for line in lines if line["message"] == "check done"]
        assert done and done[0]["request_id"] == "trace-7f00ba"
        assert done[0]["verdict"] == stores.checks.get_check_any(check_id).verdict["verdict"]
        assert token not in worker.log_text()
    finally:
        worker.stop()
        broker.close()
        stores.close()
        server.stop()
