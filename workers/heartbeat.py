"""Worker heartbeats: each worker host says "alive" every few seconds; /readyz asks whether any did.

Redis layout: a key ``ballast:heartbeat:<worker name>`` that expires after the TTL.
Embedded layout: a file ``<data dir>/heartbeats/<worker name>`` whose modification time is the beat.
"""

from __future__ import annotations

import functools
import time

import redis

from workers.runtime_config import RuntimeConfig

HEARTBEAT_PREFIX = "ballast:heartbeat:"


@functools.lru_cache(maxsize=4)
def _redis_client(url: str) -> redis.Redis:
    return redis.Redis.from_url(url, socket_timeout=2, socket_connect_timeout=2)


def beat(config: RuntimeConfig, worker_name: str) -> None:
    """Record that ``worker_name`` is alive now."""
    if config.layout == "redis" and config.redis_url:
        ttl_ms = int(config.heartbeat_ttl_s * 1000)
        _redis_client(config.redis_url).set(HEARTBEAT_PREFIX + worker_name, str(time.time()),
                                            px=ttl_ms)
        return
    config.heartbeat_dir.mkdir(parents=True, exist_ok=True)
    path = config.heartbeat_dir / worker_name.replace("/", "_")
    path.write_text(str(time.time()))


def forget(config: RuntimeConfig, worker_name: str) -> None:
    """Remove ``worker_name``'s heartbeat at a clean shutdown."""
    if config.layout == "redis" and config.redis_url:
        _redis_client(config.redis_url).delete(HEARTBEAT_PREFIX + worker_name)
        return
    (config.heartbeat_dir / worker_name.replace("/", "_")).unlink(missing_ok=True)


def live_workers(config: RuntimeConfig) -> list[str]:
    """Names of the workers whose last heartbeat is younger than the TTL."""
    if config.layout == "redis" and config.redis_url:
        client = _redis_client(config.redis_url)
        keys = client.scan_iter(match=HEARTBEAT_PREFIX + "*", count=100)
        return sorted(k.decode()[len(HEARTBEAT_PREFIX):] for k in keys)
    if not config.heartbeat_dir.is_dir():
        return []
    oldest = time.time() - config.heartbeat_ttl_s
    beats = [p for p in config.heartbeat_dir.iterdir() if p.is_file()]
    return sorted(p.name for p in beats if p.stat().st_mtime >= oldest)
