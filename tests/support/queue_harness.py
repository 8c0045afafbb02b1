"""Real processes for the queue's integration tests: a private redis-server and Celery workers.

The tests never touch the machine's Redis on 6379: each starts its own server on a spare port
(AOF on, data in the test's temporary folder) and its own worker processes, each in its own
process group so that ``kill -9`` takes the pool processes with it.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
import redis

from service.intake import load_request, new_check
from workers.celery_app import make_app
from workers.intake import SharedArrays
from workers.queue import publish
from workers.runtime_config import load_config
from workers.store import CheckStore, Priority, Submission
from workers.worker_process import worker_argv

REDIS_SERVER = shutil.which("redis-server")
# the marks of a test module that runs real workers on private redis-servers
QUEUE_TEST_MARKS = [
    pytest.mark.integration,
    pytest.mark.skipif(REDIS_SERVER is None, reason="needs redis-server"),
]


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def wait_until(predicate: Callable[[], Any], timeout_s: float, what: str,
               every_s: float = 0.1) -> Any:
    """Poll ``predicate`` until it returns something truthy; fail the test after ``timeout_s``."""
    deadline = time.monotonic() + timeout_s
    while True:
        value = predicate()
        if value:
            return value
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out after {timeout_s:g} s waiting for {what}")
        time.sleep(every_s)


class RedisServer:
    """``redis-server --port P --appendonly yes --dir <tmp>`` in the foreground of a child, with
    the persistence settings of ``deploy/redis.conf``."""

    def __init__(self, folder: Path) -> None:
        if REDIS_SERVER is None:
            raise RuntimeError("redis-server is not installed (apt-get install redis-server)")
        self.folder = folder
        self.folder.mkdir(parents=True, exist_ok=True)
        self.port = free_port()
        self.process: subprocess.Popen[bytes] | None = None

    @property
    def url(self) -> str:
        return f"redis://127.0.0.1:{self.port}/0"

    def start(self) -> None:
        argv = [REDIS_SERVER, "--port", str(self.port), "--bind", "127.0.0.1",
                "--appendonly", "yes", "--appendfsync", "everysec", "--save", "",
                "--rdbcompression", "no",
                "--dir", str(self.folder), "--daemonize", "no", "--protected-mode", "no"]
        with (self.folder / "redis.log").open("ab") as log:  # the child keeps its own copy
            self.process = subprocess.Popen(argv, stdout=log, stderr=subprocess.STDOUT)
        client = redis.Redis(port=self.port, socket_connect_timeout=0.5)

        def answers() -> bool:
            try:
                return bool(client.ping())
            except redis.exceptions.RedisError:
                return False

        wait_until(answers, 15, f"redis-server on port {self.port}")

    def stop(self) -> None:
        """SHUTDOWN (which writes the AOF), then wait for the process."""
        if self.process is None:
            return
        try:
            redis.Redis(port=self.port, socket_timeout=5).shutdown()
        except redis.exceptions.ConnectionError:
            pass  # SHUTDOWN closes the connection without a reply
        try:
            self.process.wait(timeout=15)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait()
        self.process = None

    def restart(self, down_s: float = 1.0) -> None:
        self.stop()
        time.sleep(down_s)
        self.start()


class Worker:
    """``celery -A workers.celery_app worker`` with the test's environment."""

    def __init__(self, folder: Path, env: dict[str, str], concurrency: int = 1,
                 name: str = "w") -> None:
        self.env = env
        self.log_path = folder / f"worker-{name}-{time.monotonic_ns()}.log"
        self.argv = worker_argv(concurrency, f"{name}@test", "INFO")
        self.process: subprocess.Popen[bytes] | None = None

    def start(self) -> Worker:
        with self.log_path.open("ab") as log:
            self.process = subprocess.Popen(self.argv, env=self.env, stdout=log,
                                            stderr=subprocess.STDOUT, start_new_session=True)
        wait_until(lambda: b"ready." in self.log_path.read_bytes() or not self.alive(), 120,
                   "the worker to start")
        assert self.alive(), self.log_tail()
        return self

    def alive(self) -> bool:
        return self.process is not None and self.process.poll() is None

    def kill9(self) -> None:
        """SIGKILL to the worker and its pool processes (one process group)."""
        assert self.process is not None
        os.killpg(self.process.pid, signal.SIGKILL)
        self.process.wait(timeout=10)

    def kill9_main(self) -> None:
        """SIGKILL to the worker's main process only (its pool processes are left orphaned)."""
        assert self.process is not None
        os.kill(self.process.pid, signal.SIGKILL)
        self.process.wait(timeout=10)

    def stop(self) -> None:
        if not self.alive():
            if self.process is not None:  # orphaned pool processes of a killed main process
                with contextlib.suppress(ProcessLookupError):
                    os.killpg(self.process.pid, signal.SIGKILL)
            return
        assert self.process is not None
        os.killpg(self.process.pid, signal.SIGTERM)
        try:
            self.process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            os.killpg(self.process.pid, signal.SIGKILL)
            self.process.wait(timeout=10)

    def log_text(self) -> str:
        return self.log_path.read_text(errors="replace")

    def log_tail(self, lines: int = 40) -> str:
        return "\n".join(self.log_text().splitlines()[-lines:])


def worker_env(redis_url: str | None, data_dir: Path, **overrides: str) -> dict[str, str]:
    """The environment of a test worker: this Redis (None: the embedded SQLite layout in
    ``data_dir``), fast reconciliation, testing hooks on."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("BALLAST_")}
    if redis_url:
        env["BALLAST_REDIS_URL"] = redis_url
    env.update({
        "BALLAST_DATA_DIR": str(data_dir),
        "BALLAST_TESTING": "1",
        "BALLAST_SOFT_TIME_LIMIT_S": "60",
        "BALLAST_HARD_TIME_LIMIT_S": "70",
        "BALLAST_RECONCILE_INTERVAL_S": "1",
        "BALLAST_RESTORE_INTERVAL_S": "1",
        "BALLAST_HEARTBEAT_TTL_S": "3",
        "PYTHONUNBUFFERED": "1",
    })
    env.update(overrides)
    return env


_REFERENCE_SCRIPT = """
import json, sys
from service.runner import run_check_json
requests = json.load(sys.stdin)
json.dump([run_check_json(r) for r in requests], sys.stdout)
"""


def engine_verdicts(requests: list[dict], env: dict[str, str]) -> list[dict]:
    """The engine's own verdicts (``run_check_json``), computed in a fresh process with the
    workers' environment (one BLAS thread, same code as the workers just loaded), through JSON
    as the store keeps them."""
    done = subprocess.run([sys.executable, "-c", _REFERENCE_SCRIPT], input=json.dumps(requests),
                          capture_output=True, text=True, env=env, timeout=1800, check=True)
    return json.loads(done.stdout)


def stored_batch(store: CheckStore, requests: list[tuple[str, dict]],
                 tenant: str = "t", priority: Priority = "normal") -> list[str]:
    """Store checks as the API does: validated, as one batch with its shared arrays."""
    arrays = SharedArrays()
    checks = [new_check(load_request(r), label, arrays) for label, r in requests]
    _, ids = store.create_checks(tenant, checks, as_batch=True, shared=arrays.blobs,
                                 submission=Submission(priority=priority))
    return ids


def submit(store: CheckStore, env: dict[str, str], requests: list[tuple[str, dict]],
           tenant: str = "t", priority: Priority = "normal") -> list[str]:
    """Store checks as the API does (one batch) and publish their ids to the tenant's queue on
    the env's broker."""
    ids = stored_batch(store, requests, tenant, priority)
    app = make_app(load_config(env))
    try:
        publish(app, ids, tenant, priority)
    finally:
        app.close()
    return ids


def statuses(store: CheckStore, ids: list[str]) -> dict[str, int]:
    counts: dict[str, int] = {}
    for check_id in ids:
        record = store.get_check_any(check_id)
        status = record.status if record else "missing"
        counts[status] = counts.get(status, 0) + 1
    return counts


def all_final(store: CheckStore, ids: list[str]) -> bool:
    counts = statuses(store, ids)
    return counts.get("done", 0) + counts.get("failed", 0) + counts.get("cancelled", 0) == len(ids)
