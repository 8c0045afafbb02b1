"""Compare candidate brokers for the embedded (no Redis) layout; prints rates and delivery counts.

    python -m tests.benchmarks.bench_embedded_broker [--messages 1000] [--consumers 2]

For each broker: publish N small JSON messages from one process (as the API does), then drain
them with C consumer processes that acknowledge each message (as workers do), and report
messages/s for each phase plus duplicates and losses. Redis is included as the reference when one
answers on BALLAST_BENCH_REDIS_URL (default redis://127.0.0.1:6379/15).
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import tempfile
import time
from pathlib import Path

import redis
from kombu import Connection, Exchange, Queue

QUEUE = "bench.checks"


def _queue() -> Queue:
    return Queue(QUEUE, Exchange(QUEUE, type="direct"), routing_key=QUEUE)


def _connection(url: str, options: dict) -> Connection:
    options = dict(options)
    transport = options.pop("transport", None)
    return Connection(url, transport=transport, transport_options=options)


def _publish(url: str, options: dict, n: int) -> float:
    start = time.perf_counter()
    with _connection(url, options) as conn:
        producer = conn.Producer(serializer="json")
        queue = _queue()
        queue(conn.default_channel).declare()
        for i in range(n):
            producer.publish({"check_id": f"c{i:06d}"}, exchange=queue.exchange,
                             routing_key=QUEUE)
    return time.perf_counter() - start


def _consume(url: str, options: dict, idle_s: float, out: mp.Queue) -> None:
    seen: list[str] = []
    with _connection(url, options) as conn:
        simple = conn.SimpleQueue(_queue(), serializer="json")
        while True:
            try:
                message = simple.get(block=True, timeout=idle_s)
            except simple.Empty:
                break
            seen.append(message.payload["check_id"])
            message.ack()
        simple.close()
    out.put(seen)


def measure(name: str, url: str, options: dict, n: int, consumers: int) -> dict[str, float]:
    publish_s = _publish(url, options, n)
    ctx = mp.get_context("spawn")
    out: mp.Queue = ctx.Queue()
    idle_s = 2.0
    start = time.perf_counter()
    procs = [ctx.Process(target=_consume, args=(url, options, idle_s, out))
             for _ in range(consumers)]
    for p in procs:
        p.start()
    results = [out.get() for _ in procs]
    for p in procs:
        p.join()
    drain_s = time.perf_counter() - start - idle_s  # every consumer waits idle_s on the empty queue
    ids = [i for r in results for i in r]
    return {
        "publish_per_s": n / publish_s,
        "drain_per_s": n / max(drain_s, 1e-9),
        "duplicates": len(ids) - len(set(ids)),
        "lost": n - len(set(ids)),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--messages", type=int, default=1000)
    parser.add_argument("--consumers", type=int, default=2)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "fs"
        folder.mkdir()
        candidates: list[tuple[str, str, dict]] = [
            ("sqlalchemy+sqlite", f"sqla+sqlite:///{tmp}/stock.sqlite3",
             {"connect_args": {"timeout": 30}}),
            ("ballast sqlite", f"sqlite:///{tmp}/broker.sqlite3",
             {"transport": "workers.sqlite_transport:Transport", "polling_interval": 0.1}),
            ("filesystem", "filesystem://",
             {"data_folder_in": str(folder), "data_folder_out": str(folder),
              "processed_folder": str(folder / "done"), "polling_interval": 0.1}),
        ]
        import os

        redis_url = os.environ.get("BALLAST_BENCH_REDIS_URL", "redis://127.0.0.1:6379/15")
        try:
            redis.Redis.from_url(redis_url, socket_connect_timeout=1).ping()
            redis.Redis.from_url(redis_url).delete(QUEUE)
            candidates.append(("redis (reference)", redis_url, {}))
        except redis.exceptions.ConnectionError:
            pass
        print(f"{args.messages} messages, {args.consumers} consumer processes")
        print(f"{'broker':<20}{'publish/s':>12}{'drain/s':>12}{'dup':>6}{'lost':>6}")
        for name, url, options in candidates:
            r = measure(name, url, options, args.messages, args.consumers)
            print(f"{name:<20}{r['publish_per_s']:>12.0f}{r['drain_per_s']:>12.0f}"
                  f"{r['duplicates']:>6.0f}{r['lost']:>6.0f}")


if __name__ == "__main__":
    main()
