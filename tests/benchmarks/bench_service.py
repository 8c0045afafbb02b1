"""End-to-end service benchmark: a batch through HTTP, the queue and worker processes.

    python -m tests.benchmarks.bench_service [--variants 500] [--points 401] [--workers 2]
                                             [--layout redis|embedded] [--arrays packed|lists]

Builds seeded invented variants (5 ports: 2 external, 3 probes; ``tests.queue_variants``), times
the engine on them in this process (``run_check_json``, one after the other: the engine's own
compute time), then starts the API (gunicorn) and one Celery worker with ``--workers`` processes,
exactly as ``ballast serve`` does, submits all variants as ONE batch (POST /v1/batches, JSON;
the arrays packed as base64 float64, or as JSON lists with ``--arrays lists``; the engine baseline
reads the same form), polls every 0.1 s until the batch has finished and reads every verdict
back (GET /v1/checks/{id}).

Prints checks per second and the ratio of end-to-end wall time to the engine's compute time, both
against the serial engine time and against that time divided by the number of worker processes
(the ideal parallel time); the service's target is an overhead of at most 20 %. The layout is a
private redis-server on a spare port (default when redis-server is installed) or the embedded
SQLite store and broker. Nothing is asserted: this prints ratios.
"""

# ruff: noqa: E402 (the thread settings must precede numpy's first import)
from __future__ import annotations

import os

from workers.threads import pin_engine_threads

# The engine baseline runs with the workers' BLAS threads (one unless BALLAST_ENGINE_THREADS).
pin_engine_threads(os.environ)

import argparse
import json
import re
import shutil
import statistics
import tempfile
import time
from datetime import datetime
from pathlib import Path

import numpy as np
import requests

from service.runner import run_check_json
from service.schemas.request import pack_array
from tests.queue_harness import RedisServer, free_port, wait_until
from tests.queue_variants import PORTS, variants


def engine_seconds(requests_: list[dict]) -> tuple[float, list[dict]]:
    start = time.perf_counter()
    verdicts = [run_check_json(r) for r in requests_]
    return time.perf_counter() - start, verdicts


def packed(request_: dict) -> dict:
    """The request with its frequency and data arrays packed (``{"dtype", "shape", "base64"}``)."""
    data = np.asarray(request_["data"]["re"]) + 1j * np.asarray(request_["data"]["im"])
    return {**request_, "frequency_hz": pack_array(np.asarray(request_["frequency_hz"])),
            "data": pack_array(data)}


def batch_body(batch: list, arrays: str = "lists") -> dict:
    """One batch: the port list is the shared map; each variant carries its data and devices,
    its arrays as JSON lists or packed."""
    shared = {"ports": batch[0].request["ports"]}
    encode = packed if arrays == "packed" else dict
    return {
        "label": "bench",
        "map": shared,
        "variants": [{"label": v.label,
                      **{k: x for k, x in encode(v.request).items() if k != "ports"}}
                     for v in batch],
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--variants", type=int, default=500)
    parser.add_argument("--points", type=int, default=401)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--api-processes", type=int, default=2)
    parser.add_argument("--arrays", choices=("packed", "lists"), default="packed",
                        help="how the variants' arrays travel: packed (base64 float64) or lists")
    parser.add_argument("--layout", choices=("redis", "embedded"),
                        default="redis" if shutil.which("redis-server") else "embedded")
    args = parser.parse_args()

    print(f"{args.variants} variants, {args.points} points, {len(PORTS)} ports; "
          f"{args.workers} worker processes, {args.api_processes} API processes, "
          f"layout {args.layout}, arrays {args.arrays}; "
          f"load average {os.getloadavg()[0]:.1f} at start")
    batch = variants(args.variants, points=args.points)
    encode = packed if args.arrays == "packed" else dict
    requests_ = [encode(v.request) for v in batch]
    cpu_start = time.process_time()
    engine_s, expected = engine_seconds(requests_)
    engine_cpu_s = time.process_time() - cpu_start
    print(f"engine alone (serial, this process): {engine_s:.2f} s, "
          f"{1e3 * engine_s / len(batch):.1f} ms per check")

    with tempfile.TemporaryDirectory(prefix="ballast-bench-") as tmp:
        redis_server = None
        if args.layout == "redis":
            redis_server = RedisServer(Path(tmp) / "redis")
            redis_server.start()
            os.environ["BALLAST_REDIS_URL"] = redis_server.url
        else:
            os.environ.pop("BALLAST_REDIS_URL", None)
        os.environ["BALLAST_DATA_DIR"] = str(Path(tmp) / "data")
        os.environ["BALLAST_MAX_VARIANTS"] = str(max(10_000, args.variants))

        from service.embedded import ServeOptions, Supervisor, child_processes, prepare_token
        from service.runtime_config import load_config

        config = load_config()
        config.data_dir.mkdir(parents=True, exist_ok=True)
        token = prepare_token(config)
        options = ServeOptions(port=free_port(), worker_processes=args.workers,
                               api_processes=args.api_processes)
        supervisor = Supervisor(child_processes(config, options))
        supervisor.start()
        session = requests.Session()
        session.headers["Authorization"] = f"Bearer {token}"
        base = options.base_url
        try:
            wait_until(lambda: _status(session, base + "/readyz") == 200, 120,
                       "the service to be ready", every_s=0.2)
            body = json.dumps(batch_body(batch, args.arrays))
            print(f"request body: {len(body) / 1e6:.0f} MB")
            groups = {c.name: [c.process.pid] for c in supervisor.children
                      if c.process is not None}
            if redis_server is not None and redis_server.process is not None:
                groups["redis"] = [redis_server.process.pid]
            roots = [pid for pids in groups.values() for pid in pids]
            service_cpu_before = tree_cpu_seconds(roots)
            group_cpu_before = {name: tree_cpu_seconds(pids) for name, pids in groups.items()}
            client_cpu_before = time.process_time()

            start = time.perf_counter()
            response = session.post(base + "/v1/batches", data=body,
                                    headers={"Content-Type": "application/json"}, timeout=600)
            response.raise_for_status()
            accepted_at = time.perf_counter()
            accepted = response.json()
            wait_until(lambda: session.get(f"{base}/v1/batches/{accepted['id']}",
                                           timeout=30).json()["finished"],
                       3600, "the batch to finish", every_s=0.1)
            finished_at = time.perf_counter()
            finished_cpu_s = tree_cpu_seconds(roots) - service_cpu_before
            finished_group_cpu = {name: tree_cpu_seconds(pids) - group_cpu_before[name]
                                  for name, pids in groups.items()}
            finished_client_cpu_s = time.process_time() - client_cpu_before
            got = [session.get(f"{base}/v1/checks/{cid}", timeout=30).json()
                   for cid in accepted["check_ids"]]
            fetched_at = time.perf_counter()
            service_cpu_s = tree_cpu_seconds(roots) - service_cpu_before
            group_cpu = {name: tree_cpu_seconds(pids) - group_cpu_before[name]
                         for name, pids in groups.items()}
            client_cpu_s = time.process_time() - client_cpu_before
            task_s, span_s = worker_log_times(config.data_dir / "logs" / "worker.log")
        finally:
            supervisor.stopping = True
            supervisor.stop()
            if redis_server is not None:
                redis_server.stop()

    done = sum(1 for g in got if g["status"] == "done")
    same = sum(1 for g, e in zip(got, expected, strict=True)
               if g.get("verdict") == json.loads(json.dumps(e)))
    ideal_s = engine_s / args.workers
    for name, wall in (("accepted -> finished", finished_at - start),
                       ("accepted -> all verdicts read", fetched_at - start)):
        print(f"{name:<32} {wall:7.2f} s  {len(batch) / wall:6.1f} checks/s  "
              f"wall/engine serial {wall / engine_s:5.2f}  "
              f"wall/(engine/{args.workers}) {wall / ideal_s:5.2f}")
    for window, total, by_group, client in (
            ("until the batch finished", finished_cpu_s, finished_group_cpu,
             finished_client_cpu_s),
            ("until all verdicts were read", service_cpu_s, group_cpu, client_cpu_s)):
        print(f"CPU used by the service (API, workers, store, broker) {window}: "
              f"{total:.1f} s = {total / engine_cpu_s:.2f} x the engine's own CPU "
              f"({engine_cpu_s:.1f} s): "
              + ", ".join(f"{name} {cpu:.1f} s" for name, cpu in by_group.items())
              + f"; this client {client:.1f} s")
    if task_s:
        print(f"in the worker: {1e3 * statistics.mean(task_s):.1f} ms per task on average "
              f"(engine alone {1e3 * engine_s / len(batch):.1f} ms); first task received to last "
              f"finished {span_s:.2f} s")
    print(f"POST /v1/batches took {accepted_at - start:.2f} s; "
          f"{done}/{len(batch)} done, {same}/{len(batch)} verdicts identical to the engine's; "
          f"load average {os.getloadavg()[0]:.1f} at end")


def tree_cpu_seconds(roots: list[int]) -> float:
    """CPU seconds (user + system) used so far by ``roots`` and all their descendants, read from
    /proc (Linux): live processes' own time plus the time of the children they have reaped."""
    tick = os.sysconf("SC_CLK_TCK")
    parent: dict[int, int] = {}
    cpu: dict[int, int] = {}
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            stat = Path(f"/proc/{entry}/stat").read_text()
        except OSError:
            continue
        fields = stat[stat.rindex(")") + 2:].split()
        parent[int(entry)] = int(fields[1])
        cpu[int(entry)] = sum(int(x) for x in fields[11:15])  # utime stime cutime cstime
    inside = set(roots)
    changed = True
    while changed:
        changed = False
        for pid, ppid in parent.items():
            if ppid in inside and pid not in inside:
                inside.add(pid)
                changed = True
    return sum(cpu.get(pid, 0) for pid in inside) / tick


def worker_log_times(path: Path) -> tuple[list[float], float]:
    """Task run times ("succeeded in X s") and the span from the first "received" to the last
    "succeeded" line of the worker's log."""
    text = path.read_text(errors="replace") if path.exists() else ""
    times = [float(m) for m in re.findall(r"succeeded in ([0-9.]+)s", text)]
    stamps = re.findall(r"^\[(\d{4}-\d\d-\d\d \d\d:\d\d:\d\d,\d{3}): INFO/\S+\] Task "
                        r"\S+ (received|succeeded)", text, flags=re.MULTILINE)
    parse = [(datetime.strptime(t, "%Y-%m-%d %H:%M:%S,%f").timestamp(), kind)
             for t, kind in stamps]
    first = min((t for t, k in parse if k == "received"), default=0.0)
    last = max((t for t, k in parse if k == "succeeded"), default=0.0)
    return times, max(0.0, last - first)


def _status(session: requests.Session, url: str) -> int:
    try:
        return session.get(url, timeout=5).status_code
    except requests.RequestException:
        return 0


if __name__ == "__main__":
    main()
