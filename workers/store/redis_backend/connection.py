"""One redis-py client for a deployment's stores, and what every Redis store shares."""

from __future__ import annotations

import time
from collections.abc import Callable

import redis

from workers.store.records import DEFAULT_RETENTION_S


def connect(url: str) -> redis.Redis:
    """A client on ``url`` with string replies (binary values are read with ``NEVER_DECODE``)."""
    return redis.Redis.from_url(
        url, decode_responses=True, health_check_interval=30,
        socket_connect_timeout=5, socket_timeout=30, retry_on_timeout=True,
    )


def timestamp(value: float) -> str:
    return repr(float(value))


class RedisBase:
    """A store on a Redis server; ``prefix`` separates deployments (and tests) sharing one."""

    def __init__(
        self, url: str = "redis://127.0.0.1:6379/0", *, prefix: str = "ballast:",
        retention_s: float = DEFAULT_RETENTION_S, clock: Callable[[], float] = time.time,
        client: redis.Redis | None = None,
    ) -> None:
        self.r = client if client is not None else connect(url)
        self.p = prefix
        self.retention_s = float(retention_s)
        self.clock = clock

    @property
    def _ttl(self) -> int:
        return max(int(self.retention_s), 1)

    def ping(self) -> bool:
        try:
            return bool(self.r.ping())
        except redis.RedisError:
            return False

    def close(self) -> None:
        self.r.close()
