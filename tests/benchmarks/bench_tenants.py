"""Benchmark: fair sharing under a three-tenant load (prints figures; asserts nothing).

    python -m tests.benchmarks.bench_tenants [--per-tenant 1000] [--points 61] [--workers 2]
                                             [--urgent 20] [--idle 10]

Starts a private redis-server, the API under gunicorn (two processes) and ``--workers`` worker
processes (``tests.support.tenant_load``). First, on the idle service, tenant ``gamma`` sends one
urgent check at a time (``--idle`` of them) and the time from POST to its verdict (polled every
20 ms) is taken. Then tenants ``alpha`` and ``beta`` each send one batch of ``--per-tenant``
seeded invented variants (``tests.support.queue_variants``) at once, and while those run, gamma
sends ``--urgent`` urgent checks, one after the other. Prints:

* checks per second over the whole load (first POST to the last batch finished);
* the 50th and 99th percentile of gamma's submission-to-verdict time under load, as ratios to
  its median on the idle service;
* the API's memory per MB of request body: the growth of the peak resident memory (VmHWM) of the
  API process that took the largest batch, divided by the batch's size.
"""

# ruff: noqa: E402 (the thread settings must precede numpy's first import)
from __future__ import annotations

import os

from workers.threads import pin_engine_threads

pin_engine_threads(os.environ)

import argparse
import json
import statistics
import tempfile
import threading
import time
from pathlib import Path

import requests

from tests.support.queue_harness import wait_until
from tests.support.queue_variants import variants
from tests.support.tenant_load import Stack, batch_body, rss_kib, wait_done

UNIQUE = 40


def urgent_time(session: requests.Session, stack: Stack, body: dict,
                headers: dict[str, str]) -> float:
    start = time.perf_counter()
    answer = session.post(stack.base + "/v1/checks", json=body, headers=headers, timeout=60)
    answer.raise_for_status()
    view = wait_done(session, stack.base, answer.json()["id"], headers, 600)
    if view["status"] != "done":
        raise RuntimeError(f"the urgent check ended {view['status']}")
    return time.perf_counter() - start


def percentile(values: list[float], q: float) -> float:
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, max(0, round(q / 100 * (len(ordered) - 1))))]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--per-tenant", type=int, default=1000)
    parser.add_argument("--points", type=int, default=61)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--urgent", type=int, default=20)
    parser.add_argument("--idle", type=int, default=10)
    args = parser.parse_args()
    circuits = variants(UNIQUE, points=args.points)
    load = {t: [circuits[(i * k) % UNIQUE] for i in range(args.per_tenant)]
            for t, k in (("alpha", 1), ("beta", 7))}
    bodies = {t: json.dumps(batch_body(v)).encode() for t, v in load.items()}
    urgent_body = {**circuits[3].request, "priority": "urgent"}
    print(f"{args.per_tenant} variants x 2 tenants + {args.urgent} urgent checks of a third; "
          f"{args.points} points, 5 ports; {args.workers} worker processes, 2 API processes; "
          f"load average {os.getloadavg()[0]:.1f} at start (a shared machine)")
    with tempfile.TemporaryDirectory(prefix="ballast-bench-tenants-") as tmp:
        stack = Stack(Path(tmp), workers=args.workers).start()
        try:
            heads = {t: stack.token(t) for t in ("alpha", "beta", "gamma")}
            session = requests.Session()
            time.sleep(2)  # the workers consume every tenant's queue
            idle = [urgent_time(session, stack, urgent_body, heads["gamma"])
                    for _ in range(args.idle)]
            before = {pid: rss_kib(pid) for pid in stack.api_pids()}
            accepted: dict[str, dict] = {}

            def send(tenant: str) -> None:
                answer = requests.post(stack.base + "/v1/batches", data=bodies[tenant],
                                       headers={**heads[tenant],
                                                "Content-Type": "application/json"},
                                       timeout=600)
                answer.raise_for_status()
                accepted[tenant] = answer.json()

            started = time.perf_counter()
            senders = [threading.Thread(target=send, args=(t,)) for t in load]
            for thread in senders:
                thread.start()
            for thread in senders:
                thread.join()
            growth_kib = max(rss_kib(pid, "VmHWM") - before.get(pid, 0)
                             for pid in stack.api_pids())
            loaded = [urgent_time(session, stack, urgent_body, heads["gamma"])
                      for _ in range(args.urgent)]
            for tenant, answer in accepted.items():
                wait_until(lambda a=answer, t=tenant: session.get(
                    stack.base + a["location"], headers=heads[t], timeout=30).json()["finished"],
                    3600, "the batches to finish", every_s=0.2)
            elapsed = time.perf_counter() - started
        finally:
            stack.stop()
    total = 2 * args.per_tenant + args.urgent
    base = statistics.median(idle)
    largest_mb = max(len(b) for b in bodies.values()) / 1e6
    print(f"checks per second: {total / elapsed:.1f} ({total} checks in {elapsed:.1f} s)")
    print(f"urgent check on the idle service: median {1e3 * base:.0f} ms "
          f"(min {1e3 * min(idle):.0f}, max {1e3 * max(idle):.0f})")
    print(f"urgent check under load: p50 {percentile(loaded, 50) / base:.2f} x idle, "
          f"p99 {percentile(loaded, 99) / base:.2f} x idle "
          f"(p50 {1e3 * percentile(loaded, 50):.0f} ms, p99 {1e3 * percentile(loaded, 99):.0f} ms)")
    print(f"API memory: peak grew {growth_kib / 1024:.0f} MiB for a {largest_mb:.1f} MB body "
          f"(two sent at once to 2 processes): {growth_kib / 1024 / largest_mb:.2f} MiB per MB; "
          f"load average {os.getloadavg()[0]:.1f} at end")


if __name__ == "__main__":
    main()
