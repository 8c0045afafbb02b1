"""A kombu transport on one SQLite file: the embedded layout's broker (no Redis needed).

Broker URL ``sqlite:///<path>`` with ``broker_transport = "workers.sqlite_transport:Transport"``.
It is a kombu *virtual* transport, like kombu's own SQLAlchemy transport, but talks to ``sqlite3``
directly, measured against the alternatives by ``python -m tests.benchmarks.bench_embedded_broker``:

* a message is taken with one atomic statement, ``DELETE … WHERE id = (SELECT min id …)
  RETURNING payload`` (SQLite ≥ 3.35), so two worker processes never receive the same message;
* WAL mode and a busy timeout let the API's publishes and the workers' fetches wait for each
  other instead of failing with "database is locked";
* a failed insert raises (stock kombu's SQLAlchemy transport swallows it and loses the message).

As with every virtual transport, acknowledgement is kept in the consuming process: a message
fetched by a worker that is then killed is gone. The reconciler (``workers.reconciler``) re-queues
such checks from the store, which is the record of truth.

**Event loop.** The transport says it is asynchronous and polls the file from a timer of the
worker's event loop (``register_with_event_loop``), so that Celery runs its prefork pool as on
Redis (``AsynPool``: one pipe per pool process, ``-O fair``). With a transport that has no event
loop Celery falls back to billiard's blocking pool, whose processes share one job pipe behind
one lock: measured here, a pool process killed with ``kill -9`` while it held that lock left the
replacement and the surviving process waiting on it for ever (two processes, no check taken).
"""

from __future__ import annotations

import json
import sqlite3
import threading
from pathlib import Path
from queue import Empty
from typing import Any

from kombu.transport import virtual

from workers.private_files import private_sqlite_file
from workers.runtime_config import CHECK_HEADER

_SCHEMA = """
CREATE TABLE IF NOT EXISTS kombu_messages (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    queue TEXT NOT NULL,
    payload TEXT NOT NULL
);
CREATE INDEX IF NOT EXISTS kombu_messages_queue_id ON kombu_messages (queue, id);
"""
# Columns a broker file of an earlier version lacks: the message priority (kombu's number, the
# lower taken first) and the check it names (``ballast_check`` header), then their indexes.
_ADDED_COLUMNS = ("priority INTEGER NOT NULL DEFAULT 5", "ref TEXT")
_ADDED_INDEXES = """
CREATE INDEX IF NOT EXISTS kombu_messages_queue_priority ON kombu_messages (queue, priority, id);
CREATE INDEX IF NOT EXISTS kombu_messages_priority ON kombu_messages (priority, id);
CREATE INDEX IF NOT EXISTS kombu_messages_ref ON kombu_messages (queue, ref);
"""
URGENT_PRIORITY = 0

_TAKE_ONE = """
DELETE FROM kombu_messages
WHERE id = (SELECT id FROM kombu_messages WHERE queue = ? ORDER BY priority, id LIMIT 1)
RETURNING payload
"""
# the oldest urgent message of any of the given queues
_TAKE_URGENT = """
DELETE FROM kombu_messages
WHERE id = (SELECT id FROM kombu_messages WHERE priority <= ? AND queue IN ({queues})
            ORDER BY priority, id LIMIT 1)
RETURNING queue, payload
"""


def path_from_url(url: str) -> Path:
    """``sqlite:///abs/path`` or ``sqlite:///rel/path`` → the database file's path."""
    for prefix in ("sqla+sqlite:///", "sqlite:///"):
        if url.startswith(prefix):
            return Path(url[len(prefix):])
    raise ValueError(f"not a sqlite:/// URL: {url!r}")


class Channel(virtual.Channel):
    """One SQLite connection per channel (kombu channels are not shared between threads)."""

    _connection_lock = threading.Lock()

    def __init__(self, connection: Any, **kwargs: Any) -> None:
        super().__init__(connection, **kwargs)
        options = connection.client.transport_options
        path = path_from_url(connection.client.hostname)
        path.parent.mkdir(parents=True, exist_ok=True)
        private_sqlite_file(path)  # check ids of every tenant: 0600 (workers.private_files)
        self._db = sqlite3.connect(
            path, timeout=float(options.get("busy_timeout_ms", 30_000)) / 1000,
            isolation_level=None, check_same_thread=False,
        )
        with self._connection_lock:
            self._db.execute("PRAGMA journal_mode=WAL")
            self._db.execute("PRAGMA synchronous=NORMAL")
            self._db.executescript(_SCHEMA)
            present = {row[1] for row in self._db.execute("PRAGMA table_info(kombu_messages)")}
            for column in _ADDED_COLUMNS:
                if column.split()[0] not in present:
                    self._db.execute(f"ALTER TABLE kombu_messages ADD COLUMN {column}")
            self._db.executescript(_ADDED_INDEXES)

    def _put(self, queue: str, message: Any, **kwargs: Any) -> None:
        headers = message.get("headers") or {}
        self._db.execute(
            "INSERT INTO kombu_messages (queue, payload, priority, ref) VALUES (?, ?, ?, ?)",
            (queue, json.dumps(message), self._get_message_priority(message),
             headers.get(CHECK_HEADER)),
        )

    def _poll(self, cycle: Any, callback: Any, timeout: float | None = None) -> Any:
        """Urgent messages first, the oldest of any consumed queue; then one message from the
        next queue in kombu's round-robin ``FairCycle`` (the tenants take turns)."""
        queues = list(self._active_queues)
        if queues:
            row = self._db.execute(
                _TAKE_URGENT.format(queues=", ".join("?" * len(queues))),
                (URGENT_PRIORITY, *queues)).fetchone()
            if row is not None:
                return callback(json.loads(row[1]), row[0])
        return cycle.get(callback)

    def withdraw(self, queue: str, check_ids: list[str]) -> int:
        """Remove the messages naming ``check_ids`` from ``queue``; returns how many went."""
        removed = 0
        for start in range(0, len(check_ids), 500):
            part = check_ids[start:start + 500]
            removed += self._db.execute(
                f"DELETE FROM kombu_messages WHERE queue = ? AND ref IN "
                f"({', '.join('?' * len(part))})", (queue, *part)).rowcount
        return removed

    def _get(self, queue: str, timeout: float | None = None) -> Any:
        row = self._db.execute(_TAKE_ONE, (queue,)).fetchone()
        if row is None:
            raise Empty()
        return json.loads(row[0])

    def _size(self, queue: str) -> int:
        (count,) = self._db.execute(
            "SELECT COUNT(*) FROM kombu_messages WHERE queue = ?", (queue,)
        ).fetchone()
        return int(count)

    def _purge(self, queue: str) -> int:
        cursor = self._db.execute("DELETE FROM kombu_messages WHERE queue = ?", (queue,))
        return int(cursor.rowcount)

    def _delete(self, queue: str, *args: Any, **kwargs: Any) -> None:
        self._purge(queue)

    def _new_queue(self, queue: str, **kwargs: Any) -> None:
        pass

    def _has_queue(self, queue: str, **kwargs: Any) -> bool:
        return True

    def close(self) -> None:
        super().close()
        self._db.close()


class Transport(virtual.Transport):
    """Polls every ``polling_interval`` seconds (transport option; 0.1 s in the embedded layout).

    ``max_drain_wait_s`` (transport option) caps how long one ``drain_events`` call waits. A
    Celery worker on a transport without an event loop runs its acknowledgements (and so frees
    its prefetch slots) only between ``drain_events(timeout=2.0)`` calls; measured: each worker
    process then idles up to 2 s after every check. The cap lets it come back every 0.1 s.
    """

    Channel = Channel
    max_drain_wait_s: float | None = None
    implements = virtual.Transport.implements.extend(asynchronous=True)

    def __init__(self, client: Any, **kwargs: Any) -> None:
        super().__init__(client, **kwargs)
        cap = client.transport_options.get("max_drain_wait_s")
        if cap is not None:
            self.max_drain_wait_s = float(cap)

    def drain_events(self, connection: Any, timeout: float | None = None) -> None:
        cap = self.max_drain_wait_s
        if cap is not None and (timeout is None or timeout > cap):
            timeout = cap
        super().drain_events(connection, timeout=timeout)

    def register_with_event_loop(self, connection: Any, loop: Any) -> None:
        """Poll the file every ``polling_interval`` seconds from the event loop's timer."""
        loop.call_repeatedly(self.polling_interval, self._deliver_ready, connection)

    def _deliver_ready(self, connection: Any) -> None:
        """Deliver what is waiting, as long as the consumers' prefetch allows (the channel
        raises ``Empty`` when it is full or nothing waits)."""
        while True:
            try:
                virtual.Transport.drain_events(self, connection, timeout=0)
            except TimeoutError:  # socket.timeout, raised when nothing more can be taken
                return

    can_parse_url = True
    default_port = 0
    driver_type = "sql"
    driver_name = "sqlite3"
    polling_interval = 0.1
    connection_errors = (sqlite3.OperationalError,)
    channel_errors = (sqlite3.DatabaseError,)

    def driver_version(self) -> str:
        return sqlite3.sqlite_version
