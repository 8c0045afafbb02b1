"""Request-body cap under a real gunicorn: chunked bodies over the cap answer 413, never a parse of
a truncated body; chunked bodies under the cap arrive whole.

Sources: RFC 9112 §7.1 (chunked transfer coding; http.client sends it for an iterable body),
RFC 9110 §15.5.14 (413). The app is started the way deployments start it:
``gunicorn "service.app:create_app()"`` with its settings in the environment.
"""

from __future__ import annotations

import http.client
import json
import os
import socket
import subprocess
import sys
import time

import pytest

from service.auth import create_token
from tests.api_fixtures import sqlite_file_stores

CAP = 4096


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def gunicorn(tmp_path_factory: pytest.TempPathFactory):
    tmp_path = tmp_path_factory.mktemp("gunicorn")
    store_path = tmp_path / "store.sqlite3"
    setup_store = sqlite_file_stores(store_path)
    token = create_token(setup_store.access, "acme")
    setup_store.close()
    port = _free_port()
    env = {**os.environ, "BALLAST_STORE_URL": f"sqlite:///{store_path}",
           "BALLAST_DATA_DIR": str(tmp_path), "BALLAST_MAX_BODY_BYTES": str(CAP)}
    env.pop("BALLAST_REDIS_URL", None)
    proc = subprocess.Popen(
        [sys.executable, "-m", "gunicorn", "--bind", f"127.0.0.1:{port}", "--workers", "1",
         "service.app:create_app()"],
        env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 30
        while True:
            conn = http.client.HTTPConnection("127.0.0.1", port, timeout=5)
            try:
                conn.request("GET", "/healthz")
                if conn.getresponse().status == 200:
                    break
            except OSError:
                pass
            finally:
                conn.close()
            if proc.poll() is not None or time.monotonic() > deadline:
                pytest.fail(f"gunicorn did not start: {proc.stderr.read() if proc.stderr else ''}")
            time.sleep(0.2)
        yield port, token
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        if proc.stderr:
            proc.stderr.close()


def _post_chunked(port: int, token: str, body: bytes) -> tuple[int, str, dict]:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
    pieces = (body[i:i + 1000] for i in range(0, len(body), 1000))
    conn.request("POST", "/v1/checks", body=pieces, encode_chunked=True, headers={
        "Content-Type": "application/json", "Authorization": f"Bearer {token}"})
    try:
        response = conn.getresponse()
        payload = json.loads(response.read() or b"{}")
    finally:
        conn.close()
    return response.status, response.getheader("Content-Type", ""), payload


def test_chunked_over_the_cap_is_413_under_gunicorn(gunicorn):
    port, token = gunicorn
    body = json.dumps({"pad": "x" * (2 * CAP)}).encode()
    status, content_type, problem = _post_chunked(port, token, body)
    assert status == 413 and content_type == "application/problem+json"
    assert problem["status"] == 413


def test_chunked_under_the_cap_arrives_whole(gunicorn):
    port, token = gunicorn
    # the unknown member sits at the very end: a 422 naming it proves the body was read whole
    body = (json.dumps({"pad": "y" * (CAP - 200)})[:-1] + ', "zzz_last": 1}').encode()
    assert len(body) < CAP
    status, _, problem = _post_chunked(port, token, body)
    assert status == 422
    assert "zzz_last" in [e["field"] for e in problem["errors"]]
