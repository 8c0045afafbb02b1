"""The embedded default, as a user runs it: ``ballast serve --demo`` and a restart that keeps work.

No Redis here: the store and the broker are SQLite files in a temporary data directory. The
reference for each printed verdict is ``service.runner.run_check_json`` on the same Touchstone
file and map (the engine's own answer), and for the restart the same verdicts after the service
came back.
"""

from __future__ import annotations

import json
import os
import re
from pathlib import Path

import pytest
import requests as http_client

from service.auth import DEFAULT_TENANT
from service.client import BallastClient, ClientConfig
from tests.support.queue_harness import engine_verdicts, free_port
from tests.support.queue_variants import variants
from tests.support.served import BALLAST, Served, serve_env
from workers.store import open_stores

pytestmark = pytest.mark.integration

DEMO_COMMAND = [BALLAST, "serve", "--demo"]  # the README's demo command, after installing


def test_readme_demo_command_prints_the_engines_verdicts(tmp_path: Path):
    port = free_port()
    served = Served(DEMO_COMMAND, serve_env(tmp_path / "data", port))
    try:
        url = served.read_until(r"serving at (http://\S+)", 120).group(1)
        assert url == f"http://127.0.0.1:{port}"
        token = served.read_until(r"^token: (blst_[A-Za-z0-9_-]{43})$", 5).group(1)
        served.read_until(r"^demo finished: (\d+) checks", 1500)
        # the demo says where its files went and where each batch's report is served
        where = served.read_until(r"^demo files: (\S+) \(", 5).group(1)
        reports = served.read_until(r"^demo reports .*: (.+)$", 5).group(1).split()
        for report in reports:
            page = http_client.get(report, headers={"Authorization": f"Bearer {token}"}, timeout=60)
            assert page.status_code == 200 and "text/html" in page.headers["Content-Type"]
        assert served.interrupt() == 0
    finally:
        served.kill()
    folder = tmp_path / "data" / "demo"
    assert Path(where) == folder.resolve()
    batch_ids = [m.group(1) for line in served.lines
                 for m in [re.match(r"^demo: submitted \d+ \w+ variants as batch (\S+)$", line)]
                 if m]
    assert len(batch_ids) == 2
    assert reports == [f"{url}/v1/batches/{batch_id}/report" for batch_id in batch_ids]
    assert "ballast: SIGINT received; stopping (at most 4.5 s)" in served.lines
    assert served.lines[-1] == "ballast: stopped"
    files = sorted(folder.glob("*.s*p"))
    assert files, "the demo wrote no Touchstone files"
    printed = {}
    for line in served.lines:
        match = re.match(r"^\s+(\S+)\s+(stable|unstable|indeterminate|failed)\b", line)
        if match:
            printed[match.group(1)] = match.group(2)
    assert sorted(printed) == sorted(p.name for p in files)
    # Every printed verdict is the stored verdict of that file's check (the store survives the
    # stop), and for one file per topology the stored verdict is the engine's own, recomputed
    # here (all of them would double the test's time: the engine dominates it).
    store = open_stores(str(tmp_path / "data" / "store.sqlite3")).checks
    stored = {}
    for batch in store.list_batches(DEFAULT_TENANT):
        page, _ = store.list_batch_checks(DEFAULT_TENANT, batch.id, after=None, limit=1000)
        stored.update({r.label: store.get_check_any(r.id) for r in page})
    store.close()
    assert sorted(stored) == sorted(printed)
    for label, verdict in printed.items():
        assert stored[label].verdict["verdict"] == verdict, label
    samples = [next(p for p in files if p.name.startswith(family + "_"))
               for family in sorted({p.name.split("_")[0] for p in files})]
    requests = [{**json.loads((folder / f"{p.name.split('_')[0]}_map.json").read_text()),
                 "touchstone": p.read_text()} for p in samples]
    for path, want in zip(samples, engine_verdicts(requests, dict(os.environ)), strict=True):
        assert stored[path.name].verdict == want, path.name


def test_accepted_checks_survive_a_restart(tmp_path: Path):
    data_dir = tmp_path / "data"
    port = free_port()
    env = serve_env(data_dir, port)
    batch = variants(3, points=101)
    want = dict(zip([v.label for v in batch],
                    engine_verdicts([v.request for v in batch], dict(os.environ)), strict=True))
    accept_only = Served([BALLAST, "serve", "--workers", "0"], env)
    try:
        accept_only.read_until(r"serving at", 120)
        token = accept_only.read_until(r"^token: (\S+)$", 5).group(1)
        client = BallastClient(ClientConfig(url=f"http://127.0.0.1:{port}", token=token))
        accepted = client.submit_batch(None, [{"label": v.label, **v.request} for v in batch])
        assert client.get_batch(accepted["id"])["counts_by_status"]["queued"] == 3
        assert accept_only.interrupt() == 0
    finally:
        accept_only.kill()

    restarted = Served([BALLAST, "serve"], env)
    try:
        restarted.read_until(r"serving at", 120)
        assert restarted.read_until(r"^token: (\S+)$", 5).group(1) == token  # kept in data dir
        client.wait_batch(accepted["id"], timeout_s=300)
        items = {item["label"]: item for item in client.iter_batch_checks(accepted["id"])}
        for check_id, variant in zip(accepted["check_ids"], batch, strict=True):
            check = client.get_check(check_id)
            assert check["status"] == "done", check
            assert check["verdict"] == want[variant.label]
            assert items[variant.label]["status"] == "done"
        assert restarted.interrupt() == 0
    finally:
        restarted.kill()
