"""Several tenants at once through HTTP: a private redis-server, the API under gunicorn (two
processes) and worker processes, all on one host sharing one metrics folder, as a deployment
runs them (``deploy/``). Used by the load test and by ``tests.benchmarks.bench_tenants``.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import requests
from prometheus_client.parser import text_string_to_metric_families

from service.auth import create_token
from service.schemas.request import pack_array
from tests.support.queue_harness import RedisServer, Worker, free_port, wait_until, worker_env
from tests.support.queue_variants import Variant
from workers.store import Stores, open_stores

METRICS_TOKEN = "load-test-operators"


def packed_variant(variant: Variant) -> dict[str, Any]:
    """A variant as a batch member: its data packed (base64 binary64), its label."""
    request = variant.request
    data = np.asarray(request["data"]["re"]) + 1j * np.asarray(request["data"]["im"])
    return {"label": variant.label, "data": pack_array(data), "devices": request["devices"]}


def batch_body(variants: list[Variant], **envelope: Any) -> dict[str, Any]:
    """One batch: frequencies, ports, S parameters and z0 shared; data and devices per variant."""
    first = variants[0].request
    shared = {"frequency_hz": pack_array(np.asarray(first["frequency_hz"])),
              "ports": first["ports"], "parameters": first["parameters"],
              "z0_ohm": first["z0_ohm"]}
    return {"map": shared, "variants": [packed_variant(v) for v in variants], **envelope}


@dataclass
class Stack:
    """Redis, gunicorn and workers in ``folder``; tokens per tenant."""

    folder: Path
    workers: int = 2
    api_processes: int = 2
    extra_env: dict[str, str] = field(default_factory=dict)
    redis: RedisServer | None = None
    api: subprocess.Popen[bytes] | None = None
    pool: list[Worker] = field(default_factory=list)
    stores: Stores | None = None
    base: str = ""
    env: dict[str, str] = field(default_factory=dict)

    def start(self) -> Stack:
        self.redis = RedisServer(self.folder / "redis")
        self.redis.start()
        self.env = worker_env(self.redis.url, self.folder / "data", **{
            "BALLAST_METRICS_DIR": str(self.folder / "metrics"),
            "BALLAST_METRICS_TOKEN": METRICS_TOKEN, "BALLAST_RATE_LIMIT": "1000000",
            "BALLAST_CHECK_RATE_LIMIT": "1000000", "BALLAST_CALLBACK_ALLOW_PRIVATE": "1",
            "BALLAST_CALLBACK_RETRY_S": "0.5,1,2", **self.extra_env})
        self.stores = open_stores(self.redis.url)
        port = free_port()
        self.base = f"http://127.0.0.1:{port}"
        with (self.folder / "api.log").open("ab") as log:
            self.api = subprocess.Popen(
                [sys.executable, "-m", "gunicorn", "-c", "python:service.gunicorn_conf",
                 "--bind", f"127.0.0.1:{port}", "--workers", str(self.api_processes),
                 "service.app:create_app()"],
                env=self.env, stdout=log, stderr=subprocess.STDOUT)
        for n in range(self.workers):
            self.pool.append(Worker(self.folder, self.env, concurrency=1, name=f"w{n}").start())
        wait_until(self._ready, 60, "the API to be ready")
        return self

    def _ready(self) -> bool:
        try:
            return requests.get(self.base + "/readyz", timeout=2).status_code == 200
        except requests.RequestException:
            return False

    def token(self, tenant: str) -> dict[str, str]:
        assert self.stores is not None
        return {"Authorization": f"Bearer {create_token(self.stores.access, tenant)}"}

    def metrics(self) -> str:
        return requests.get(self.base + "/metrics", timeout=30,
                            headers={"Authorization": f"Bearer {METRICS_TOKEN}"}).text

    def api_pids(self) -> list[int]:
        assert self.api is not None
        out = subprocess.run(["pgrep", "-P", str(self.api.pid)], capture_output=True,
                             text=True, check=False).stdout.split()
        return [int(p) for p in out]

    def stop(self) -> None:
        for worker in self.pool:
            worker.stop()
        if self.api is not None:
            self.api.terminate()
            try:
                self.api.wait(timeout=30)
            except subprocess.TimeoutExpired:
                self.api.kill()
                self.api.wait()
        if self.stores is not None:
            self.stores.close()
        if self.redis is not None:
            self.redis.stop()


def rss_kib(pid: int, field_name: str = "VmRSS") -> int:
    """A process's resident memory (``VmRSS``) or its peak (``VmHWM``) from /proc, in KiB."""
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith(field_name + ":"):
            return int(line.split()[1])
    return 0


def wait_done(session: requests.Session, base: str, check_id: str, headers: dict[str, str],
              timeout_s: float) -> dict[str, Any]:
    """Poll a check every 20 ms until it is final; returns its view."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        view = session.get(f"{base}/v1/checks/{check_id}", headers=headers, timeout=30).json()
        if view["status"] in ("done", "failed", "cancelled"):
            return view
        time.sleep(0.02)
    raise AssertionError(f"check {check_id} did not finish within {timeout_s:g} s")


def cpu_count() -> int:
    return os.cpu_count() or 1


def samples(text: str) -> dict[tuple[str, tuple[tuple[str, str], ...]], float]:
    """Each sample of a Prometheus text exposition by (name, sorted labels), read with
    prometheus_client's own parser."""
    out = {}
    for family in text_string_to_metric_families(text):
        for sample in family.samples:
            out[(sample.name, tuple(sorted(sample.labels.items())))] = sample.value
    return out
