"""Fixtures for the HTTP API tests: an app on SQLite stores with a fake queue, tokens, helpers.

The fake queue records what the API enqueued and says what /readyz should see; ``run_worker``
does what a worker does with a check id (claim, decode the stored request, run the engine,
complete), so verdicts in these tests are the engine's own.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pytest

from service.app import create_app
from service.auth import create_token
from workers.engine import run_check
from workers.intake import decode_stored
from workers.store import CheckStore, Stores
from workers.store.sqlite_backend import SqliteAccessStore, SqliteCheckStore, SqliteDatabase


@dataclass
class FakeQueue:
    enqueued: list[str] = field(default_factory=list)
    routes: list[dict[str, Any]] = field(default_factory=list)
    withdrawn: list[tuple[str, list[str]]] = field(default_factory=list)
    alive: bool = True
    reachable: bool = True

    def enqueue(self, check_ids: list[str], **route: Any) -> None:
        self.enqueued += check_ids
        self.routes.append(route)

    def withdraw(self, tenant: str, check_ids: list[str]) -> int:
        self.withdrawn.append((tenant, list(check_ids)))
        return len(check_ids)


def api_config(stores: Stores, queue: FakeQueue, **overrides: Any) -> dict[str, Any]:
    return {
        "BALLAST_STORES": stores,
        "BALLAST_ENQUEUE": queue.enqueue,
        "BALLAST_WORKERS_ALIVE": lambda: queue.alive,
        "BALLAST_QUEUE_REACHABLE": lambda: queue.reachable,
        "BALLAST_WITHDRAW": queue.withdraw,
        "BALLAST_QUEUE_SIZE": lambda tenant: 0,
        **overrides,
    }


def sqlite_file_stores(path: Any) -> Stores:
    """Both stores on one SQLite file, on the real clock."""
    database = SqliteDatabase(path)
    return Stores(SqliteCheckStore(database=database), SqliteAccessStore(database=database))


@pytest.fixture
def api_stores(tmp_path) -> Iterator[Stores]:
    stores = sqlite_file_stores(tmp_path / "api.sqlite3")
    yield stores
    stores.close()


@pytest.fixture
def fake_queue() -> FakeQueue:
    return FakeQueue()


@pytest.fixture
def app(api_stores, fake_queue):
    return create_app(api_config(api_stores, fake_queue))


@pytest.fixture
def client(app):
    return app.test_client()


@pytest.fixture
def auth(api_stores) -> dict[str, str]:
    return {"Authorization": f"Bearer {create_token(api_stores.access, 'acme')}"}


@pytest.fixture
def rival_auth(api_stores) -> dict[str, str]:
    return {"Authorization": f"Bearer {create_token(api_stores.access, 'rival')}"}


def run_worker(checks: CheckStore, check_ids: list[str]) -> list[dict[str, Any]]:
    """Claim each check, run the engine on its stored request and complete it (what
    ``workers.tasks`` does)."""
    verdicts = []
    for check_id in check_ids:
        assert checks.claim(check_id, lease_s=60, max_attempts=3) is not None
        verdict = run_check(decode_stored(checks.get_request(check_id))).to_dict()
        assert checks.complete(check_id, verdict)
        verdicts.append(verdict)
    return verdicts


def tiny_request() -> dict[str, Any]:
    """A transconductance gm = 50 mS from port "in" to port "out", each port shunted by 20 mS,
    given as Y data with the device on (Y21 = gm) and its gain-off form implied by the device."""
    f = [1e8, 1e9, 2e9, 3e9]
    return {
        "frequency_hz": f,
        "parameters": "Y",
        "data": {"re": [[[0.02, 0.0], [0.05, 0.02]]] * len(f),
                 "im": [[[0.0, 0.0], [0.0, 0.0]]] * len(f)},
        "ports": [{"name": "in", "role": "external"}, {"name": "out", "role": "external"}],
        "devices": [{"name": "Q1", "gm_s": 0.05, "control": ["in", None],
                     "output": ["out", None]}],
    }


RLC_FREQUENCY_HZ = np.geomspace(1e7, 1e12, 4001)


def rlc_request(r_ohm: float, frequency_hz: np.ndarray = RLC_FREQUENCY_HZ) -> dict[str, Any]:
    """Parallel RLC (L = 1 nH, C = 2 pF) with a −3 mS negative conductance as a device; closed
    form natural frequencies −G/2C ± j√(1/LC − (G/2C)²), G = 1/R − 3 mS: unstable for R > 333 Ω."""
    from workers.lumped.families import parallel_rlc_negative_g

    return parallel_rlc_negative_g(r_ohm=r_ohm).check_request(frequency_hz)
