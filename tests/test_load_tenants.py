"""Load test (issue 10): 2,000 variants from three tenants at once, through HTTP (gunicorn, two
processes) and two worker processes on a private Redis.

None is lost, every verdict equals the engine's own (``service.runner.run_check_json`` in a fresh
process with the workers' environment), and the third tenant's urgent check, sent while the
other two tenants' 1,999 checks wait, starts after at most a few of theirs (the bound of issue
10: "not more than a few checks' time"). The metrics that the API and the workers write on this
host add up to the load, and the first tenant's batch callback reaches a loopback receiver,
signed. Counts, not times, are asserted: speed lives in ``tests.benchmarks.bench_tenants``.
"""

from __future__ import annotations

import threading
import time
from pathlib import Path

import pytest
import requests

from tests.support.queue_harness import QUEUE_TEST_MARKS, engine_verdicts, wait_until
from tests.support.queue_variants import variants
from tests.support.tenant_load import Stack, batch_body, samples, wait_done
from tests.support.webhook_receiver import Receiver
from workers.callbacks.signing import verify

pytestmark = [*QUEUE_TEST_MARKS, pytest.mark.slow]

UNIQUE = 40  # distinct circuits; each tenant's variants cycle through them
FEW = 4  # checks that may start between the urgent check's submission and its own start


def test_three_tenants_two_thousand_variants(tmp_path: Path):
    circuits = variants(UNIQUE, points=61)
    stack = Stack(tmp_path).start()
    try:
        expected = engine_verdicts([c.request for c in circuits], stack.env)
        heads = {t: stack.token(t) for t in ("alpha", "beta", "gamma")}
        load = {"alpha": [circuits[i % UNIQUE] for i in range(1000)],
                "beta": [circuits[(i * 7) % UNIQUE] for i in range(999)]}
        accepted: dict[str, dict] = {}
        with Receiver() as receiver:
            def send(tenant: str, hook: str | None) -> None:
                extra = {"callback_url": hook} if hook else {}
                answer = requests.post(stack.base + "/v1/batches", timeout=300,
                                       json=batch_body(load[tenant], **extra),
                                       headers=heads[tenant])
                assert answer.status_code == 202, answer.text
                accepted[tenant] = answer.json()

            senders = [threading.Thread(target=send, args=("alpha", receiver.url)),
                       threading.Thread(target=send, args=("beta", None))]
            for thread in senders:
                thread.start()
            for thread in senders:
                thread.join()
            backlog = accepted["alpha"]["check_ids"] + accepted["beta"]["check_ids"]
            wait_until(lambda: sum(1 for i in backlog[:50] + backlog[-50:]
                                   if stack.stores.checks.get_check_any(i).status == "done") > 4,
                       120, "both backlogs to start")
            urgent_body = {**circuits[3].request, "priority": "urgent"}
            urgent = requests.post(stack.base + "/v1/checks", json=urgent_body, timeout=60,
                                   headers=heads["gamma"])
            assert urgent.status_code == 202, urgent.text
            session = requests.Session()
            view = wait_done(session, stack.base, urgent.json()["id"], heads["gamma"], 120)
            assert view["status"] == "done" and view["priority"] == "urgent"
            assert view["verdict"] == expected[3]
            mine = stack.stores.checks.get_check_any(urgent.json()["id"])
            started_between = sum(
                1 for i in backlog
                if (r := stack.stores.checks.get_check_any(i)).started_at is not None
                and mine.created_at <= r.started_at <= mine.started_at)
            assert started_between <= FEW
            still_queued = sum(1 for i in backlog
                               if stack.stores.checks.get_check_any(i).status == "queued")
            assert still_queued > 500  # it did not wait for the backlog

            for tenant in ("alpha", "beta"):
                batch = accepted[tenant]["location"]
                wait_until(lambda b=batch, t=tenant: session.get(
                    stack.base + b, headers=heads[t], timeout=30).json()["finished"],
                    600, f"{tenant}'s batch to finish", every_s=1.0)
            for tenant, circuit_of in (("alpha", lambda i: i % UNIQUE),
                                       ("beta", lambda i: (i * 7) % UNIQUE)):
                counts = session.get(stack.base + accepted[tenant]["location"],
                                     headers=heads[tenant], timeout=30).json()
                assert counts["counts_by_status"]["done"] == len(load[tenant])  # none lost
                for i, check_id in enumerate(accepted[tenant]["check_ids"]):
                    record = stack.stores.checks.get_check_any(check_id)
                    assert record.verdict == expected[circuit_of(i)], (tenant, i)
            wait_until(lambda: receiver.calls, 30, "alpha's batch callback")
        _, headers, body = receiver.calls[0]
        secret = session.get(stack.base + "/v1/callbacks/secret", headers=heads["alpha"],
                             timeout=30).json()["secret"]
        assert verify(secret, headers, body, time.time())
        got = samples(stack.metrics())
        finished = sum(v for (name, _), v in got.items()
                       if name == "ballast_checks_finished_total")
        submitted = sum(v for (name, _), v in got.items()
                        if name == "ballast_checks_submitted_total")
        assert submitted == finished == 2000
        assert got[("ballast_engine_seconds_count", ())] == 2000
        assert got[("ballast_queue_depth", (("tenant", "alpha"),))] == 0
    finally:
        stack.stop()
