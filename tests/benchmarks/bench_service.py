"""End-to-end service benchmark: a batch through HTTP, the queue and worker processes.

    python -m tests.benchmarks.bench_service [--variants 500] [--points 401] [--workers 2]
                                             [--rounds 5] [--layout redis|embedded]
                                             [--arrays packed|lists]

Builds seeded invented variants (5 ports: 2 external, 3 probes;
``tests.support.queue_variants``), starts the API (gunicorn) and one Celery worker with
``--workers`` processes, exactly as ``ballast serve`` does, and then, ``--rounds`` times: times
the engine on the variants in this process
(``run_check_json``, one after the other: the engine's own compute time, measured next to each
round because a shared machine's speed drifts), submits all variants as ONE batch
(POST /v1/batches, JSON; the arrays packed as base64 float64, or as JSON lists with
``--arrays lists``; the engine baseline reads the same form), polls every 0.1 s until the batch
has finished and reads every verdict back (GET /v1/checks/{id}).

Prints, per round, checks per second and the ratio of end-to-end wall time (from sending the
POST) to the engine's compute time, both against the serial engine time and against that time
divided by the number of worker processes (the ideal parallel time), the CPU used by each part of
the service, and the median ratio over the rounds; the service's target is an overhead of at most
20 % (ratio to the serial engine time <= 1.2). The layout is a
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
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

import numpy as np
import requests

from service.runner import run_check_json
from service.schemas.request import pack_array
from tests.support.queue_harness import RedisServer, free_port, wait_until
from tests.support.queue_variants import PORTS, variants


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


@dataclass
class Round:
    """One submission of the batch, with the engine timed just before it."""

    engine_s: float
    engine_cpu_s: float
    submitted_to_finished_s: float
    submitted_to_read_s: float
    post_s: float
    cpu_finished: dict[str, float]  # process group -> CPU seconds until the batch finished
    cpu_read: dict[str, float]  # ... until every verdict was read
    task_s: list[float]
    span_s: float
    first_received_s: float  # from sending the POST to the worker's first "received" line
    done: int
    same: int


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--variants", type=int, default=500)
    parser.add_argument("--points", type=int, default=401)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--api-processes", type=int, default=2)
    parser.add_argument("--rounds", type=int, default=5,
                        help="submissions of the batch, each after its own engine timing")
    parser.add_argument("--arrays", choices=("packed", "lists"), default="packed",
                        help="how the variants' arrays travel: packed (base64 float64) or lists")
    parser.add_argument("--layout", choices=("redis", "embedded"),
                        default="redis" if shutil.which("redis-server") else "embedded")
    args = parser.parse_args()

    print(f"{args.variants} variants, {args.points} points, {len(PORTS)} ports; "
          f"{args.workers} worker processes, {args.api_processes} API processes, "
          f"layout {args.layout}, arrays {args.arrays}, {args.rounds} rounds; "
          f"load average {os.getloadavg()[0]:.1f} at start")
    batch = variants(args.variants, points=args.points)
    encode = packed if args.arrays == "packed" else dict
    requests_ = [encode(v.request) for v in batch]
    body = json.dumps(batch_body(batch, args.arrays)).encode()  # sent as UTF-8 bytes, as read
    print(f"request body: {len(body) / 1e6:.0f} MB")

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
        # every round reads each verdict back: above the default 1,200 requests a minute
        os.environ["BALLAST_RATE_LIMIT"] = str(1_000_000)

        from service.embedded import ServeOptions, Supervisor, child_processes, prepare_token
        from workers.runtime_config import load_config

        config = load_config()
        config.data_dir.mkdir(parents=True, exist_ok=True)
        token = prepare_token(config)
        options = ServeOptions(port=free_port(), worker_processes=args.workers,
                               api_processes=args.api_processes)
        supervisor = Supervisor(child_processes(config, options))
        supervisor.start()
        session = requests.Session()
        session.headers["Authorization"] = f"Bearer {token}"
        rounds: list[Round] = []
        try:
            wait_until(lambda: _status(session, options.base_url + "/readyz") == 200, 120,
                       "the service to be ready", every_s=0.2)
            groups = {c.name: [c.process.pid] for c in supervisor.children
                      if c.process is not None}
            if redis_server is not None and redis_server.process is not None:
                groups["redis"] = [redis_server.process.pid]
            for number in range(1, args.rounds + 1):
                rounds.append(one_round(session, options.base_url, body, requests_, groups,
                                        config.data_dir / "logs" / "worker.log"))
                report_round(number, rounds[-1], len(batch), args.workers)
        except BaseException:
            for log in sorted((config.data_dir / "logs").glob("*.log")):  # before they go
                lines = log.read_text(errors="replace").splitlines()
                print(f"--- last lines of {log.name} ---", *lines[-15:], sep="\n")
            raise
        finally:
            supervisor.stopping = True
            supervisor.stop()
            if redis_server is not None:
                redis_server.stop()

    if rounds:
        ratios = [r.submitted_to_finished_s / r.engine_s for r in rounds]
        print(f"summary over {len(rounds)} rounds: submitted -> finished / engine serial: median "
              f"{statistics.median(ratios):.2f} (min {min(ratios):.2f}, max {max(ratios):.2f}); "
              f"target <= 1.20; median "
              f"{statistics.median(len(batch) / r.submitted_to_finished_s for r in rounds):.1f}"
              f" checks/s; load average {os.getloadavg()[0]:.1f} at end")


def one_round(session: requests.Session, base: str, body: bytes, requests_: list[dict],
              groups: dict[str, list[int]], worker_log: Path) -> Round:
    """Time the engine on ``requests_`` in this process, then submit the batch once, wait for
    it to finish and read every verdict back."""
    cpu_start = time.process_time()
    engine_s, expected = engine_seconds(requests_)
    engine_cpu_s = time.process_time() - cpu_start
    log_offset = worker_log.stat().st_size if worker_log.exists() else 0

    def cpu_now() -> dict[str, float]:
        out = {name: tree_cpu_seconds(pids) for name, pids in groups.items()}
        out["client"] = time.process_time()
        return out

    before = cpu_now()
    sent_at = time.time()
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
    at_finish = cpu_now()
    answers = [session.get(f"{base}/v1/checks/{cid}", timeout=30)
               for cid in accepted["check_ids"]]
    refused = [a.status_code for a in answers if a.status_code != 200]
    if refused:
        raise RuntimeError(f"{len(refused)} verdict reads were refused: HTTP {set(refused)}")
    got = [a.json() for a in answers]
    read_at = time.perf_counter()
    at_read = cpu_now()
    task_s, first_received, span_s = worker_log_times(worker_log, log_offset)
    return Round(
        engine_s=engine_s, engine_cpu_s=engine_cpu_s,
        submitted_to_finished_s=finished_at - start, submitted_to_read_s=read_at - start,
        post_s=accepted_at - start,
        cpu_finished={k: at_finish[k] - before[k] for k in before},
        cpu_read={k: at_read[k] - before[k] for k in before},
        task_s=task_s, span_s=span_s, first_received_s=first_received - sent_at,
        done=sum(1 for g in got if g["status"] == "done"),
        same=sum(1 for g, e in zip(got, expected, strict=True)
                 if g.get("verdict") == json.loads(json.dumps(e))),
    )


def report_round(number: int, r: Round, n: int, workers: int) -> None:
    print(f"round {number}: engine alone (serial, this process) {r.engine_s:.2f} s, "
          f"{1e3 * r.engine_s / n:.1f} ms per check")
    for name, wall in (("submitted -> finished", r.submitted_to_finished_s),
                       ("submitted -> all verdicts read", r.submitted_to_read_s)):
        print(f"  {name:<31} {wall:7.2f} s  {n / wall:6.1f} checks/s  "
              f"wall/engine serial {wall / r.engine_s:5.2f}  "
              f"wall/(engine/{workers}) {wall / (r.engine_s / workers):5.2f}")
    for window, cpu in (("until the batch finished", r.cpu_finished),
                        ("until all verdicts were read", r.cpu_read)):
        service = sum(v for k, v in cpu.items() if k != "client")
        print(f"  CPU of the service {window}: {service:.1f} s = "
              f"{service / r.engine_cpu_s:.2f} x the engine's own ({r.engine_cpu_s:.1f} s): "
              + ", ".join(f"{k} {v:.1f} s" for k, v in cpu.items() if k != "client")
              + f"; this client {cpu['client']:.1f} s")
    if r.task_s:
        print(f"  in the worker: {1e3 * statistics.mean(r.task_s):.1f} ms per task on average;"
              f" first task received {r.first_received_s:.2f} s after the POST was sent, last"
              f" finished {r.span_s:.2f} s after that")
    print(f"  POST /v1/batches took {r.post_s:.2f} s; {r.done}/{n} done, "
          f"{r.same}/{n} verdicts identical to the engine's")


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


def worker_log_times(path: Path, offset: int = 0) -> tuple[list[float], float, float]:
    """Task run times ("succeeded in X s"), the time (epoch seconds) of the first "received" line
    and the span from it to the last "succeeded" line of the worker's log, from byte ``offset``
    on (the log's times are local time, to the millisecond)."""
    if not path.exists():
        return [], 0.0, 0.0
    with path.open("rb") as log:
        log.seek(offset)
        text = log.read().decode(errors="replace")
    times = [float(m) for m in re.findall(r"succeeded in ([0-9.]+)s", text)]
    stamps = re.findall(r"^\[(\d{4}-\d\d-\d\d \d\d:\d\d:\d\d,\d{3}): INFO/\S+\] Task "
                        r"\S+ (received|succeeded)", text, flags=re.MULTILINE)
    parse = [(datetime.strptime(t, "%Y-%m-%d %H:%M:%S,%f").timestamp(), kind)
             for t, kind in stamps]
    first = min((t for t, k in parse if k == "received"), default=0.0)
    last = max((t for t, k in parse if k == "succeeded"), default=0.0)
    return times, first, max(0.0, last - first)


def _status(session: requests.Session, url: str) -> int:
    try:
        return session.get(url, timeout=5).status_code
    except requests.RequestException:
        return 0


if __name__ == "__main__":
    main()
