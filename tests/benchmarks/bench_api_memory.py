"""API memory per MB of body, and the size of a realistic large batch (the default body limit).

    python -m tests.benchmarks.bench_api_memory [--cases all|NAME,...] [--corners 36]

Builds request bodies from the invented two-stage LNA of the demo (``workers.lumped``: 8 ports,
1,001 points from 1 MHz to 1 THz, as the demo's files), starts the API under gunicorn exactly as
deployed (one process, one thread, ``tests.support.api_server``) for each case, sends one
request and reads the worker process's peak resident memory (Linux ``VmHWM``, reset before the
request through ``/proc/<pid>/clear_refs``) against its resident memory just before. Cases:

- ``batch-touchstone``: a corner sweep (gm scale × source via × gate damping, ``--corners``
  distinct circuits) as one multipart batch of Touchstone files (13 significant digits);
- ``batch-packed``: the same sweep as one JSON batch with packed arrays (base64 binary64);
- ``batch-lists``: the first ten corners as one JSON batch with the arrays as JSON lists;
- ``check-lists``: one check of the LNA at 15,000 points as JSON lists (about 40 MB, the size
  of the issue's measurement);
- ``check-packed``: the same check with packed arrays.

Prints per case: the body (MB = 10^6 bytes), the peak growth (MiB) and the ratio of peak growth
to body size, with the status code of the answer. Nothing is asserted.
"""

from __future__ import annotations

import argparse
import io
import itertools
import json
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import requests

from tests.support.api_server import ApiServer
from tests.support.payloads import packed_array
from workers.lumped.checkdata import to_touchstone
from workers.lumped.families import two_stage_lna

BAND_HZ = np.geomspace(1e6, 1e12, 1001)
BIG_CHECK_HZ = np.geomspace(1e6, 1e12, 15_000)
MB = 1e6
MIB = 1 << 20


def corners(count: int) -> list[tuple[str, dict]]:
    """``count`` distinct corners of the LNA as JSON check requests (S data as lists)."""
    grid = itertools.product((0.9, 1.0, 1.1), (0.15e-9, 0.25e-9, 0.4e-9),
                             (47.0, 100.0, 220.0, None))
    out = []
    for gm, via, damping in itertools.islice(itertools.cycle(grid), count):
        case = two_stage_lna(gate_return_damping_ohm=damping, source_via_h=via, gm_scale=gm)
        out.append((f"lna gm{gm} via{via:.2g} damp{damping}", case.check_request(BAND_HZ)))
    return out


def _mapping(request: dict) -> dict:
    return {"ports": request["ports"], "devices": request["devices"]}


def _s(request: dict) -> np.ndarray:
    return np.asarray(request["data"]["re"]) + 1j * np.asarray(request["data"]["im"])


def _packed(request: dict) -> dict:
    out = dict(request)
    out["frequency_hz"] = packed_array(np.asarray(request["frequency_hz"]), "float64")
    out["data"] = packed_array(_s(request), "complex128")
    return out


def batch_touchstone(count: int) -> tuple[bytes, str]:
    variants = corners(count)
    files = [(label, to_touchstone(BAND_HZ, _s(r), 50.0)) for label, r in variants]
    fields = [("map", ("map.json", json.dumps(_mapping(variants[0][1])), "application/json"))]
    fields += [("files", (f"v{i}.s8p", text.encode(), "application/octet-stream"))
               for i, (_, text) in enumerate(files)]
    prepared = requests.Request("POST", "http://x/v1/batches", files=fields).prepare()
    return prepared.body, prepared.headers["Content-Type"]  # type: ignore[return-value]


def batch_json(count: int, packed: bool) -> tuple[bytes, str]:
    variants = corners(count)
    body = {"map": _mapping(variants[0][1]), "variants": [
        {"label": label, "frequency_hz": (_packed(r) if packed else r)["frequency_hz"],
         "parameters": "S", "z0_ohm": 50.0, "data": (_packed(r) if packed else r)["data"]}
        for label, r in variants]}
    return json.dumps(body).encode(), "application/json"


def check_json(packed: bool) -> tuple[bytes, str]:
    request = two_stage_lna().check_request(BIG_CHECK_HZ)
    return json.dumps(_packed(request) if packed else request).encode(), "application/json"


def _memory(pid: int, field: str) -> int:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1]) * 1024
    raise LookupError(field)


def measure(name: str, body: bytes, content_type: str) -> None:
    with tempfile.TemporaryDirectory(prefix="ballast-bench-memory-") as folder, \
            ApiServer(Path(folder), threads=1, BALLAST_MAX_BODY_BYTES=str(1 << 31),
                      BALLAST_MAX_UNFINISHED="1000000", BALLAST_RATE_LIMIT="1000000") as api:
        session = requests.Session()
        session.headers["Authorization"] = f"Bearer {api.token}"
        warm, _ = batch_json(1, packed=True)
        session.post(f"{api.url}/v1/batches", data=warm,
                     headers={"Content-Type": "application/json"}, timeout=600)
        (pid,) = api.worker_pids()
        time.sleep(0.5)
        before = _memory(pid, "VmRSS")
        Path(f"/proc/{pid}/clear_refs").write_text("5")  # reset VmHWM to the current RSS
        answer = session.post(f"{api.url}/v1/{'batches' if 'batch' in name else 'checks'}",
                              data=io.BytesIO(body), timeout=1800,
                              headers={"Content-Type": content_type})
        peak = _memory(pid, "VmHWM")
    growth = peak - before
    print(f"{name:18s} body {len(body) / MB:8.1f} MB   peak growth {growth / MIB:8.1f} MiB   "
          f"ratio {growth / len(body):5.2f}   answer {answer.status_code}", flush=True)


CASES: dict[str, Callable[[argparse.Namespace], tuple[bytes, str]]] = {
    "batch-touchstone": lambda a: batch_touchstone(a.corners),
    "batch-packed": lambda a: batch_json(a.corners, packed=True),
    "batch-lists": lambda a: batch_json(10, packed=False),
    "check-lists": lambda a: check_json(packed=False),
    "check-packed": lambda a: check_json(packed=True),
}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--cases", default="all")
    parser.add_argument("--corners", type=int, default=36)
    args = parser.parse_args()
    names = list(CASES) if args.cases == "all" else args.cases.split(",")
    print(f"LNA corners: {args.corners} × (8 ports, {BAND_HZ.size} points); one API process, "
          "one thread; the machine may be shared")
    for name in names:
        body, content_type = CASES[name](args)
        measure(name, body, content_type)


if __name__ == "__main__":
    main()
