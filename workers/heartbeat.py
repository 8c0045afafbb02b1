"""Worker heartbeats: each worker host says "alive" every few seconds; /readyz asks whether any did.

Redis layout: a key ``ballast:heartbeat:<worker name>`` that expires after the TTL.
Embedded layout: a file ``<data dir>/heartbeats/<worker name>`` whose modification time is the beat.
Either holds ``<pid of the worker's main process> <time>``: a worker restarted under the same
name (systemd) is another instance, ``<name>#<pid>`` (:func:`instance`), so the checks its dead
predecessor claimed are still seen as orphaned.
"""

from __future__ import annotations

import functools
import os
import time

import redis

from workers.runtime_config import RuntimeConfig

HEARTBEAT_PREFIX = "ballast:heartbeat:"


@functools.lru_cache(maxsize=4)
def _redis_client(url: str) -> redis.Redis:
    return redis.Redis.from_url(url, socket_timeout=2, socket_connect_timeout=2)


def instance(worker_name: str, main_pid: int) -> str:
    """How a claim names the worker instance that holds a check: ``<name>#<main pid>``."""
    return f"{instance_prefix(worker_name)}{main_pid}"


def instance_prefix(worker_name: str) -> str:
    """What every instance of ``worker_name`` begins with (``instance`` without the pid)."""
    return f"{worker_name.replace('/', '_')}#"


def beat(config: RuntimeConfig, worker_name: str) -> None:
    """Record that ``worker_name`` (this process) is alive now."""
    value = f"{os.getpid()} {time.time()}"
    if config.layout == "redis" and config.redis_url:
        ttl_ms = int(config.heartbeat_ttl_s * 1000)
        _redis_client(config.redis_url).set(HEARTBEAT_PREFIX + worker_name, value, px=ttl_ms)
        return
    config.heartbeat_dir.mkdir(parents=True, exist_ok=True)
    path = config.heartbeat_dir / worker_name.replace("/", "_")
    path.write_text(value)


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


def live_instances(config: RuntimeConfig) -> list[str]:
    """The worker instances (:func:`instance`) whose last heartbeat is younger than the TTL."""
    if config.layout == "redis" and config.redis_url:
        client = _redis_client(config.redis_url)
        keys = list(client.scan_iter(match=HEARTBEAT_PREFIX + "*", count=100))
        values = client.mget(keys) if keys else []
        pairs = [(k.decode()[len(HEARTBEAT_PREFIX):], v) for k, v in zip(keys, values,
                                                                         strict=True)]
    else:
        if not config.heartbeat_dir.is_dir():
            return []
        oldest = time.time() - config.heartbeat_ttl_s
        pairs = []
        for path in config.heartbeat_dir.iterdir():
            try:
                if path.is_file() and path.stat().st_mtime >= oldest:
                    pairs.append((path.name, path.read_bytes()))
            except OSError:  # removed at a clean shutdown meanwhile
                continue
    out = []
    for name, value in pairs:
        pid = (value or b"").split()[:1]
        if pid and pid[0].isdigit() and len(value.split()) == 2:
            out.append(instance(name, int(pid[0])))
    return sorted(out)
