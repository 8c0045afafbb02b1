"""Shared fixtures: stores on both back ends (SQLite in tmp_path, a real Redis on 127.0.0.1:6379).

Redis tests use database 13 and a unique key prefix per test, and delete only their own keys, so
they can share a server with anything else. Set BALLAST_TEST_REDIS_URL to use another server.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator

from workers.threads import pin_engine_threads

# the engine runs with one BLAS thread in the workers and in `ballast serve`; the tests run it the
# same way (set before numpy's first import: nothing imported so far loads it)
pin_engine_threads(os.environ)

import pytest  # noqa: E402

from workers.store import Stores  # noqa: E402
from workers.store.redis_backend import RedisAccessStore, RedisCheckStore, connect  # noqa: E402
from workers.store.sqlite_backend import SqliteAccessStore, SqliteCheckStore, SqliteDatabase  # noqa: E402

pytest_plugins = ["tests.api_fixtures"]

TEST_REDIS_URL = os.environ.get("BALLAST_TEST_REDIS_URL", "redis://127.0.0.1:6379/13")


class FakeClock:
    """A clock the test moves by hand (``clock.now += 60``)."""

    def __init__(self, start: float = 1_800_000_000.0) -> None:
        self.now = start

    def __call__(self) -> float:
        return self.now


@pytest.fixture
def clock() -> FakeClock:
    return FakeClock()


def redis_stores(clock: FakeClock) -> Iterator[Stores]:
    """Both Redis stores on one client under a fresh key prefix; deletes its keys afterwards."""
    prefix = f"ballast-test:{uuid.uuid4().hex}:"
    client = connect(TEST_REDIS_URL)
    stores = Stores(RedisCheckStore(prefix=prefix, clock=clock, client=client),
                    RedisAccessStore(prefix=prefix, clock=clock, client=client))
    if not stores.checks.ping():
        pytest.fail(f"no Redis at {TEST_REDIS_URL} (the store tests need a real Redis)")
    try:
        yield stores
    finally:
        keys = list(client.scan_iter(match=prefix + "*", count=1000))
        if keys:
            client.delete(*keys)
        client.close()


def sqlite_stores(path, clock: FakeClock, **kwargs: float) -> Stores:
    database = SqliteDatabase(path)
    return Stores(SqliteCheckStore(database=database, clock=clock, **kwargs),
                  SqliteAccessStore(database=database, clock=clock, **kwargs))


@pytest.fixture
def redis_server(tmp_path):
    """A private redis-server on a spare port for the worker tests (tests.support.queue_harness),
    shut down afterwards."""
    from tests.support.queue_harness import RedisServer

    server = RedisServer(tmp_path / "redis")
    server.start()
    yield server
    server.stop()


@pytest.fixture(params=["sqlite", "redis"])
def stores(request: pytest.FixtureRequest, tmp_path, clock: FakeClock) -> Iterator[Stores]:
    """The same tests run on both store implementations."""
    if request.param == "sqlite":
        pair = sqlite_stores(tmp_path / "store.sqlite3", clock)
        yield pair
        pair.close()
    else:
        yield from redis_stores(clock)


@pytest.fixture
def checks(stores: Stores):
    return stores.checks


@pytest.fixture
def access(stores: Stores):
    return stores.access
