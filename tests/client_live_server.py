"""The real Flask app on a real socket, with the SQLite store and an in-process queue, for the
client and command-line tests.

``InlineQueue`` stands in for the Celery workers: it claims each enqueued check in the store,
runs it through ``service.runner.run_check_json`` (the same call the worker task makes) on a
background thread, and completes or fails it. ``hold()`` keeps checks queued so that tests can
cancel them.
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from werkzeug.serving import WSGIRequestHandler, make_server

from service.app import create_app
from service.auth import create_token
from tests.api_fixtures import sqlite_file_stores
from workers.engine import run_check
from workers.intake import decode_stored
from workers.store import CheckStore, Stores


class InlineQueue:
    """Runs enqueued checks one after another on a daemon thread."""

    def __init__(self, store: CheckStore) -> None:
        self.store = store
        self._ids: queue.Queue[str | None] = queue.Queue()
        self._running = threading.Event()
        self._running.set()
        self._thread = threading.Thread(target=self._work, name="inline-queue", daemon=True)
        self._thread.start()

    def enqueue(self, check_ids: list[str], **route: Any) -> None:
        for check_id in check_ids:
            self._ids.put(check_id)

    def hold(self) -> None:
        self._running.clear()

    def release(self) -> None:
        self._running.set()

    def stop(self) -> None:
        self._running.set()
        self._ids.put(None)
        self._thread.join(timeout=30)

    def _work(self) -> None:
        while True:
            check_id = self._ids.get()
            if check_id is None:
                return
            self._running.wait()
            record = self.store.claim(check_id, 60.0, 3)
            if record is None:  # cancelled meanwhile, or already final
                continue
            try:
                stored = self.store.get_request(check_id)
                if stored is None:
                    raise LookupError("the check's request is missing from the store")
                verdict = run_check(decode_stored(stored)).to_dict()
            except Exception as exc:
                self.store.fail(check_id, f"{type(exc).__name__}: {exc}")
            else:
                self.store.complete(check_id, verdict)


class _QuietHandler(WSGIRequestHandler):
    def log_request(self, code: int | str = "-", size: int | str = "-") -> None:
        pass


@dataclass
class LiveServer:
    url: str
    token: str
    stores: Stores
    queue: InlineQueue
    app: Any


@contextmanager
def live_server(folder: Path, **config: Any) -> Iterator[LiveServer]:
    """Serve ``create_app`` on 127.0.0.1 (a free port) until the block ends."""
    stores = sqlite_file_stores(folder / "store.sqlite3")
    inline = InlineQueue(stores.checks)
    app = create_app({
        "BALLAST_STORES": stores,
        "BALLAST_ENQUEUE": inline.enqueue,
        "BALLAST_WORKERS_ALIVE": lambda: True,
        "BALLAST_QUEUE_REACHABLE": lambda: True,
        **config,
    })
    token = create_token(stores.access, "acme")
    server = make_server("127.0.0.1", 0, app, threaded=True, request_handler=_QuietHandler)
    thread = threading.Thread(target=server.serve_forever, name="live-server", daemon=True)
    thread.start()
    try:
        yield LiveServer(f"http://127.0.0.1:{server.server_port}", token, stores, inline, app)
    finally:
        server.shutdown()
        thread.join(timeout=10)
        inline.stop()
        stores.close()


@contextmanager
def cli_live_server(folder: Path, patch: Any) -> Iterator[LiveServer]:
    """``live_server`` that the command line and ``BallastClient.from_environment`` find through
    the environment (``patch``: a ``pytest.MonkeyPatch``), with no client config file."""
    with live_server(folder / "server") as live:
        for name, value in (("BALLAST_URL", live.url), ("BALLAST_TOKEN", live.token),
                            ("BALLAST_CONFIG", str(folder / "absent.toml"))):
            patch.setenv(name, value)
        yield live
