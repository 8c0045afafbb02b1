"""The command line that starts a Celery worker for ballast (``ballast worker``, ``ballast serve``,
the deploy units and the tests all use it, so they run workers the same way)."""

from __future__ import annotations

import sys

from workers.runtime_config import CHECK_QUEUE


def worker_argv(
    concurrency: int, name: str | None = None, loglevel: str = "INFO",
) -> list[str]:
    """``python -m celery -A workers.celery_app worker …`` as an argv list.

    Gossip, mingle and event heartbeats are off: they need a broadcast exchange (absent from the
    embedded SQLite broker) and nothing in ballast uses them; liveness is the heartbeat that
    ``workers.lifecycle`` writes.
    """
    argv = [
        sys.executable, "-m", "celery", "-A", "workers.celery_app", "worker",
        "--queues", CHECK_QUEUE,
        "--concurrency", str(concurrency),
        "--loglevel", loglevel,
        "--without-gossip", "--without-mingle", "--without-heartbeat",
        "-O", "fair",
    ]
    if name:
        argv += ["--hostname", name]
    return argv
