"""One redis-py client for a deployment's stores, and what every Redis store shares."""

from __future__ import annotations

import time
from collections.abc import Callable

import redis
from redis.backoff import ExponentialBackoff
from redis.exceptions import BusyLoadingError
from redis.retry import Retry

from workers.store.records import DEFAULT_RETENTION_S


def patient_retry() -> Retry:
    """Retries through a Redis restart: 10 retries 0.1, 0.2, 0.4 … s apart, at most 2 s, about
    13 s of waiting in all (what a worker's store writes need: a check left ``running`` is
    otherwise only re-queued when its lease runs out)."""
    return Retry(ExponentialBackoff(cap=2.0, base=0.1), retries=10)


def connect(url: str, retry: Retry | None = None) -> redis.Redis:
    """A client on ``url`` with string replies (binary values are read with ``NEVER_DECODE``).

    Every command, pipeline and script is retried on connection errors and time-outs by
    redis-py's ``Retry``: ``retry``, else redis-py's default (3 retries, jittered backoff of 1 to
    10 s). With ``retry``, also while the server refuses connections (it is restarting: redis-py
    6.4 retries a refused connect only when told to) and while it replays its append-only file
    (``BusyLoadingError``).
    """
    options: dict = {}
    if retry is not None:
        options = {"retry": retry, "retry_on_error": [BusyLoadingError, ConnectionRefusedError]}
    return redis.Redis.from_url(
        url, decode_responses=True, health_check_interval=30,
        socket_connect_timeout=5, socket_timeout=30, **options,
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
