"""``ballast serve`` stops within 5 s of Ctrl-C (SIGINT) or SIGTERM, says so on screen, and an
orderly stop leaves no ERROR line anywhere (its stdout, its stderr, the API and worker logs).

Issue 13 sets the 5 s. A check still running when the stop comes is cancelled by Celery's cold
shutdown and must run again at the next start: checked by restarting on the same data directory
and waiting for its verdict (the engine's own, recomputed here).
"""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

import pytest
import requests

from service.client import BallastClient, ClientConfig
from tests.api_fixtures import tiny_request
from tests.support.queue_harness import engine_verdicts, free_port
from tests.support.served import BALLAST, Served, serve_env

pytestmark = pytest.mark.integration

STOP_LIMIT_S = 5.0


def wait_healthy(url: str, served: Served, timeout_s: float = 120.0) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        assert served.process.poll() is None, served.stderr_now()
        try:
            if requests.get(url + "/healthz", timeout=2).status_code == 200:
                return
        except requests.RequestException:
            pass
        time.sleep(0.2)
    raise AssertionError(f"{url}/healthz did not answer 200 within {timeout_s:g} s")


def stop_and_time(served: Served, signum: int) -> float:
    """Send ``signum``; the seconds until the process has exited (at most 30 s of waiting)."""
    start = time.monotonic()
    served.process.send_signal(signum)
    served.process.wait(timeout=30)
    elapsed = time.monotonic() - start
    served.kill()  # drains the rest of stdout
    return elapsed


def error_lines(served: Served, data_dir: Path) -> list[str]:
    texts = ["\n".join(served.lines), served.stderr_now()]
    texts += [log.read_text(errors="replace") for log in sorted((data_dir / "logs").glob("*.log"))]
    return [line for text in texts for line in text.splitlines() if "ERROR" in line]


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_idle_serve_stops_within_5_s_and_says_so(tmp_path: Path, signum: int):
    data_dir = tmp_path / "data"
    port = free_port()
    served = Served([BALLAST, "serve"], serve_env(data_dir, port))
    try:
        wait_healthy(f"http://127.0.0.1:{port}", served)
        served.read_until(r"^press Ctrl-C to stop$", 30)
        elapsed = stop_and_time(served, signum)
    finally:
        served.kill()
    assert served.process.returncode == 0
    assert elapsed < STOP_LIMIT_S, f"took {elapsed:.2f} s"
    name = signal.Signals(signum).name
    assert f"ballast: {name} received; stopping (at most 4.5 s)" in served.lines
    assert served.lines[-1] == "ballast: stopped"  # no check was running
    assert error_lines(served, data_dir) == []


def test_a_running_check_is_cancelled_within_5_s_and_runs_at_the_next_start(tmp_path: Path):
    data_dir = tmp_path / "data"
    port = free_port()
    url = f"http://127.0.0.1:{port}"
    env = serve_env(data_dir, port)
    # workers/tasks.py's test hook: a check labelled "slow" sleeps 60 s before the engine runs
    busy_env = {**env, "BALLAST_TESTING": "1", "BALLAST_TEST_PAUSE_LABEL": "slow",
                "BALLAST_TEST_PAUSE_S": "60"}
    served = Served([BALLAST, "serve"], busy_env)
    try:
        wait_healthy(url, served)
        token = served.read_until(r"^token: (\S+)$", 30).group(1)
        client = BallastClient(ClientConfig(url=url, token=token))
        accepted = client.submit_batch(None, [{"label": "slow", **tiny_request()}])
        check_id = accepted["check_ids"][0]
        deadline = time.monotonic() + 60
        while client.get_check(check_id)["status"] != "running":
            assert time.monotonic() < deadline, "the check never started"
            time.sleep(0.1)
        elapsed = stop_and_time(served, signal.SIGINT)
    finally:
        served.kill()
    assert served.process.returncode == 0
    assert elapsed < STOP_LIMIT_S, f"took {elapsed:.2f} s with a check running"
    assert "ballast: SIGINT received; stopping (at most 4.5 s)" in served.lines
    assert served.lines[-1] == ("ballast: stopped; 1 check(s) were still running: they run "
                                "again when a worker next starts")
    assert error_lines(served, data_dir) == []

    restarted = Served([BALLAST, "serve"], env)  # no test hook: the check now runs through
    try:
        wait_healthy(url, restarted)
        client.wait_batch(accepted["id"], timeout_s=120)
        check = client.get_check(check_id)
        stop_and_time(restarted, signal.SIGTERM)
    finally:
        restarted.kill()
    assert check["status"] == "done", check
    assert check["verdict"] == engine_verdicts([tiny_request()], dict(os.environ))[0]
    assert restarted.lines[-1] == "ballast: stopped"
    assert error_lines(restarted, data_dir) == []
