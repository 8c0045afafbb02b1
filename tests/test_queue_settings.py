"""Queue settings and the embedded SQLite broker transport, without worker processes.

References: Celery 5.6 configuration reference (docs.celeryq.dev: accept_content,
task_acks_late, task_reject_on_worker_lost, worker_prefetch_multiplier, and the Redis broker's
visibility_timeout, which "must exceed the longest task run time" or a running task is
redelivered), and kombu 5.6's consumer contract (a consumer with ``accept=["json"]`` raises
``ContentDisallowed`` for any other serializer).
"""

from __future__ import annotations

import multiprocessing as mp
from pathlib import Path

import pytest
from kombu import Connection, Exchange, Queue
from kombu.exceptions import ContentDisallowed

from workers.celery_app import REDIS_TRANSPORT, SQLITE_TRANSPORT, celery_settings
from workers.runtime_config import CHECK_QUEUE, load_config
from workers.threads import BLAS_THREAD_VARIABLES, pin_engine_threads

LIMIT_CASES = [  # (soft, hard) in seconds
    ("300", "330"),
    ("2", "3"),
    ("3600", "7200"),
]


@pytest.mark.parametrize(("soft", "hard"), LIMIT_CASES)
def test_lease_and_visibility_outlast_the_hard_limit(soft: str, hard: str):
    config = load_config({"BALLAST_REDIS_URL": "redis://h:6379/0",
                          "BALLAST_SOFT_TIME_LIMIT_S": soft, "BALLAST_HARD_TIME_LIMIT_S": hard})
    settings = celery_settings(config)
    assert settings["task_soft_time_limit"] == float(soft)
    assert settings["task_time_limit"] == float(hard)
    assert config.lease_s > config.hard_time_limit_s
    visibility = settings["broker_transport_options"]["visibility_timeout"]
    assert visibility > config.lease_s


def test_hard_limit_must_exceed_soft_limit():
    with pytest.raises(ValueError, match="HARD"):
        load_config({"BALLAST_SOFT_TIME_LIMIT_S": "60", "BALLAST_HARD_TIME_LIMIT_S": "30"})


def test_json_only_late_ack_prefetch_one():
    for env in ({"BALLAST_REDIS_URL": "redis://h:6379/0"}, {"BALLAST_DATA_DIR": "/tmp/x"}):
        settings = celery_settings(load_config(env))
        assert settings["accept_content"] == ["json"]
        assert settings["task_serializer"] == "json"
        assert settings["task_acks_late"] is True
        assert settings["task_reject_on_worker_lost"] is True
        assert settings["worker_prefetch_multiplier"] == 1
        assert settings["result_backend"] is None


def test_layout_picks_the_transport(tmp_path: Path):
    redis_settings = celery_settings(load_config({"BALLAST_REDIS_URL": "redis://h:6379/0"}))
    assert redis_settings["broker_transport"] == REDIS_TRANSPORT
    embedded = load_config({"BALLAST_DATA_DIR": str(tmp_path)})
    assert embedded.layout == "embedded"
    settings = celery_settings(embedded)
    assert settings["broker_transport"] == SQLITE_TRANSPORT
    assert settings["broker_url"] == f"sqlite:///{tmp_path / 'broker.sqlite3'}"


def _queue() -> Queue:
    return Queue(CHECK_QUEUE, Exchange(CHECK_QUEUE, type="direct"), routing_key=CHECK_QUEUE)


def _connection(path: Path) -> Connection:
    return Connection(f"sqlite:///{path}", transport=SQLITE_TRANSPORT,
                      transport_options={"polling_interval": 0.01, "max_drain_wait_s": 0.1})


def _publish(path: Path, items: list[str], serializer: str = "json") -> None:
    with _connection(path) as conn:
        producer = conn.Producer(serializer=serializer)
        for item in items:
            producer.publish({"id": item}, exchange=_queue().exchange, routing_key=CHECK_QUEUE,
                             declare=[_queue()])


def _drain(path: str, out: mp.Queue) -> None:
    taken: list[str] = []
    with _connection(Path(path)) as conn:
        simple = conn.SimpleQueue(_queue())
        misses = 0
        while misses < 10:  # 10 empty polls of 0.1 s: the queue is drained
            try:
                message = simple.get(block=True, timeout=0.1)
            except simple.Empty:
                misses += 1
                continue
            misses = 0
            taken.append(message.payload["id"])
            message.ack()
        simple.close()
    out.put(taken)


def test_sqlite_transport_is_fifo_and_durable(tmp_path: Path):
    path = tmp_path / "broker.sqlite3"
    _publish(path, [f"m{i}" for i in range(5)])
    ctx = mp.get_context("spawn")  # a new process: the messages came from the file, not memory
    out: mp.Queue = ctx.Queue()
    proc = ctx.Process(target=_drain, args=(str(path), out))
    proc.start()
    assert out.get(timeout=60) == [f"m{i}" for i in range(5)]
    proc.join(timeout=30)


def test_sqlite_transport_delivers_each_message_once_to_competing_consumers(tmp_path: Path):
    path = tmp_path / "broker.sqlite3"
    items = [f"m{i:03d}" for i in range(300)]
    _publish(path, items)
    ctx = mp.get_context("spawn")
    out: mp.Queue = ctx.Queue()
    procs = [ctx.Process(target=_drain, args=(str(path), out)) for _ in range(3)]
    for proc in procs:
        proc.start()
    taken = [item for _ in procs for item in out.get(timeout=120)]
    for proc in procs:
        proc.join(timeout=30)
    assert sorted(taken) == items  # none lost, none twice


def test_pickled_message_is_refused_by_a_json_only_consumer(tmp_path: Path):
    path = tmp_path / "broker.sqlite3"
    _publish(path, ["x"], serializer="pickle")
    with _connection(path) as conn:
        simple = conn.SimpleQueue(_queue(), accept=["json"])
        with pytest.raises(ContentDisallowed, match="pickle"):
            simple.get(block=True, timeout=5)
        simple.close()


def test_engine_thread_setting_reaches_the_served_worker_and_api(tmp_path: Path, monkeypatch):
    """BALLAST_ENGINE_THREADS (DEVELOPERS.md, operations) sets the BLAS thread variables of the
    processes ``ballast serve`` starts; a BLAS variable set by the operator stays as set."""
    from service.embedded import ServeOptions, child_processes

    for name in BLAS_THREAD_VARIABLES:
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setenv("BALLAST_ENGINE_THREADS", "3")
    monkeypatch.setenv("MKL_NUM_THREADS", "5")
    monkeypatch.setenv("BALLAST_DATA_DIR", str(tmp_path))
    monkeypatch.delenv("BALLAST_REDIS_URL", raising=False)
    children = child_processes(load_config(), ServeOptions(port=8123))
    assert {c.name for c in children} == {"worker", "api"}
    for child in children:
        assert child.env["OPENBLAS_NUM_THREADS"] == child.env["OMP_NUM_THREADS"] == "3"
        assert child.env["MKL_NUM_THREADS"] == "5"


def test_engine_threads_default_to_one():
    env: dict[str, str] = {}
    pin_engine_threads(env)
    assert env == dict.fromkeys(BLAS_THREAD_VARIABLES, "1")
