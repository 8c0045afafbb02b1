"""``ballast serve``: the API (gunicorn) and a worker as child processes of one command.

Without ``BALLAST_REDIS_URL`` this is the embedded default: the store and the broker are SQLite
files under the data directory, so accepted checks survive a restart. With it, the same processes
use Redis and this host simply joins a distributed deployment.

The supervisor prints the base URL and the token, restarts a child that dies (at most
``MAX_RESTARTS`` times a minute), and on SIGINT/SIGTERM says so on screen and stops within
``STOP_TOTAL_S``. Every child gets SIGTERM: the API stops accepting and finishes the requests in
hand (gunicorn's graceful stop), the worker stops taking checks (Celery's warm shutdown). A worker
that was running checks gets ``STOP_BUSY_COLD_AT_S`` for them to finish, then Celery's cold
shutdown, which cancels them and releases their leases in the store, so that the reconciler
queues them again as soon as a worker runs (the next ``ballast serve``). What still runs at
``STOP_COLD_AT_S`` gets SIGQUIT, at ``STOP_KILL_AT_S`` SIGKILL with its process group. Signals
otherwise go to each child's main process only: its pool processes are its own to stop.
"""

from __future__ import annotations

import ctypes
import os
import secrets
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import requests

from service.config import printable_url
from workers.private_files import private_directory, private_file
from workers.runtime_config import RuntimeConfig, load_config
from workers.threads import pin_engine_threads
from workers.worker_process import worker_argv

MAX_RESTARTS = 5
# Seconds after the stop signal. Measured idle on 2 cores: gunicorn stops in about 2.2 s, a
# Celery worker's warm shutdown takes 2.3 s and its cold shutdown about 1.8 s.
STOP_BUSY_COLD_AT_S = 1.0  # a worker with running checks: cold shutdown (checks cancelled)
STOP_COLD_AT_S = 3.0  # anything still running: SIGQUIT (gunicorn: quick stop; Celery: cold)
STOP_KILL_AT_S = 4.0  # anything still running: SIGKILL, with its process group
STOP_TOTAL_S = STOP_KILL_AT_S + 0.5
API_GRACEFUL_S = 2  # gunicorn's graceful timeout under ``ballast serve`` (below STOP_COLD_AT_S)
POLL_S = 0.05
TOKEN_FILE = "local-token"


@dataclass(frozen=True)
class ServeOptions:
    """What ``ballast serve`` was asked for."""

    host: str = "127.0.0.1"
    port: int = 8000
    worker_processes: int = 2
    api_processes: int = 2
    demo: bool = False
    ready_timeout_s: float = 60.0

    @property
    def base_url(self) -> str:
        host = "127.0.0.1" if self.host in ("0.0.0.0", "") else self.host
        return f"http://{host}:{self.port}"


def _die_with_parent() -> None:  # pragma: no cover - runs in the child between fork and exec
    """Own session; on Linux also SIGTERM when ``ballast serve`` dies (prctl PR_SET_PDEATHSIG)."""
    os.setsid()
    if sys.platform.startswith("linux"):
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, signal.SIGTERM)


@dataclass
class Child:
    """One supervised process."""

    name: str
    argv: list[str]
    env: dict[str, str]
    log_path: Path
    process: subprocess.Popen[bytes] | None = None
    restarts: list[float] = field(default_factory=list)

    def start(self) -> None:
        private_directory(self.log_path.parent)
        with private_file(self.log_path).open("ab") as log:  # the child keeps its own copy
            self.process = subprocess.Popen(
                self.argv, env=self.env, stdin=subprocess.DEVNULL, stdout=log,
                stderr=subprocess.STDOUT, preexec_fn=_die_with_parent,
            )

    def alive(self) -> bool:
        return self.process is not None and self.process.poll() is None

    def signal(self, signum: int, group: bool = False) -> None:
        """Signal the main process, or with ``group`` its whole session (the pool too)."""
        if self.process is None or (not group and not self.alive()):
            return
        try:
            if group:
                os.killpg(self.process.pid, signum)
            else:
                self.process.send_signal(signum)
        except ProcessLookupError:
            pass

    def wait(self, timeout_s: float) -> bool:
        if self.process is None:
            return True
        try:
            self.process.wait(timeout=timeout_s)
            return True
        except subprocess.TimeoutExpired:
            return False


def local_token(config: RuntimeConfig) -> str | None:
    """``BALLAST_TOKEN`` if set; else the embedded layout's saved token (None the first time)."""
    token = os.environ.get("BALLAST_TOKEN", "").strip()
    if token:
        return token
    path = config.data_dir / TOKEN_FILE
    if config.layout == "embedded" and path.is_file():
        return path.read_text().strip() or None
    return None


def prepare_token(config: RuntimeConfig) -> str:
    """Register the token the service prints (creating one if needed) and keep it for restarts."""
    from service.auth import ensure_token
    from workers.store_access import open_configured_stores

    stores = open_configured_stores(config)
    try:
        token = ensure_token(stores.access, local_token(config))
    finally:
        stores.close()
    if config.layout == "embedded" and not os.environ.get("BALLAST_TOKEN"):
        path = config.data_dir / TOKEN_FILE
        tmp = private_file(path.with_suffix(f".{secrets.token_hex(4)}"))  # 0600 from the start
        tmp.write_text(token + "\n")
        tmp.replace(path)
    return token


def metrics_folder(config: RuntimeConfig) -> Path:
    """The folder the API and worker processes share for their metrics samples, emptied (a new
    run starts its counters at zero, as prometheus_client's multiprocess mode asks)."""
    folder = Path(os.environ.get("BALLAST_METRICS_DIR") or config.data_dir / "metrics")
    if folder.is_dir():
        for sample in folder.glob("*.db"):
            sample.unlink()
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def worker_name(config: RuntimeConfig) -> str:
    """The Celery hostname of this ``ballast serve``'s worker (unique to this run)."""
    return f"ballast-{config.layout}-{os.getpid()}@{os.uname().nodename}"


def running_checks(config: RuntimeConfig) -> int:
    """How many checks the store has running under this run's worker (after a stop: the ones
    its cold shutdown cancelled, queued again when a worker runs); 0 if the store is gone."""
    from workers.heartbeat import instance_prefix
    from workers.store_access import open_configured_stores

    prefix = instance_prefix(worker_name(config))
    try:
        stores = open_configured_stores(config)
        try:
            owners = stores.checks.running_workers().values()
        finally:
            stores.close()
    except Exception:  # a stop must not fail on a store that is gone (Redis down)
        return 0
    return sum(1 for owner in owners if owner and owner.startswith(prefix))


def child_processes(config: RuntimeConfig, options: ServeOptions) -> list[Child]:
    env = dict(os.environ)
    env["BALLAST_DATA_DIR"] = str(config.data_dir)
    env["BALLAST_METRICS_DIR"] = str(metrics_folder(config))
    env.pop("PROMETHEUS_MULTIPROC_DIR", None)
    env.setdefault("PYTHONUNBUFFERED", "1")
    pin_engine_threads(env)  # honours BALLAST_ENGINE_THREADS, as workers/celery_app.py does
    logs = config.data_dir / "logs"
    children = []
    if options.worker_processes > 0:
        name = worker_name(config)
        children.append(Child("worker", worker_argv(options.worker_processes, name), env,
                              logs / "worker.log"))
    api_argv = [
        sys.executable, "-m", "gunicorn", "-c", "python:service.gunicorn_conf",
        "--bind", f"{options.host}:{options.port}", "--workers", str(options.api_processes),
        "--graceful-timeout", str(API_GRACEFUL_S), "service.app:create_app()",
    ]
    children.append(Child("api", api_argv, env, logs / "api.log"))
    return children


def wait_until_healthy(base_url: str, timeout_s: float, alive: Callable[[], bool]) -> bool:
    """Poll ``/healthz`` until it answers 200, a child dies, or the time is up."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if not alive():
            return False
        try:
            if requests.get(base_url + "/healthz", timeout=2).status_code == 200:
                return True
        except requests.RequestException:
            pass
        time.sleep(0.2)
    return False


class Supervisor:
    def __init__(self, children: list[Child]) -> None:
        self.children = children
        self.stopping = False
        self.stop_signal: int | None = None

    def request_stop(self, signum: int, _frame: object) -> None:
        """Signal handler: only a flag (the main loop and the demo poll it and say so)."""
        self.stopping = True
        self.stop_signal = self.stop_signal or signum

    def all_alive(self) -> bool:
        return all(child.alive() for child in self.children)

    def start(self) -> None:
        for child in self.children:
            child.start()

    def keep_alive(self, log: Callable[[str], None]) -> bool:
        """Restart dead children; False when one died too often."""
        now = time.monotonic()
        for child in self.children:
            if child.alive() or self.stopping:
                continue
            child.restarts = [t for t in child.restarts if now - t < 60.0] + [now]
            if len(child.restarts) > MAX_RESTARTS:
                log(f"ballast: the {child.name} process keeps dying; stopping")
                return False
            code = child.process.returncode if child.process else None
            log(f"ballast: the {child.name} process exited ({code}); restarting it")
            child.start()
        return True

    def stop(self, busy: bool = False) -> None:
        """Stop every child within ``STOP_TOTAL_S``; ``busy``: the worker is running checks."""
        for child in self.children:
            child.signal(signal.SIGTERM)  # gunicorn: graceful stop; Celery: warm shutdown
        start = time.monotonic()
        quit_sent: set[str] = set()
        killed: set[str] = set()
        while time.monotonic() - start < STOP_TOTAL_S:
            alive = [child for child in self.children if child.alive()]
            if not alive:
                return
            elapsed = time.monotonic() - start
            for child in alive:
                cold_at = STOP_BUSY_COLD_AT_S if busy and child.name == "worker" else \
                    STOP_COLD_AT_S
                if elapsed >= STOP_KILL_AT_S and child.name not in killed:
                    child.signal(signal.SIGKILL, group=True)
                    killed.add(child.name)
                elif elapsed >= cold_at and child.name not in quit_sent:
                    child.signal(signal.SIGQUIT)
                    quit_sent.add(child.name)
            time.sleep(POLL_S)


def serve(options: ServeOptions, out: Callable[[str], None] = print) -> int:
    """Run the service until SIGINT/SIGTERM; with ``options.demo``, run the demo first."""
    config = load_config()
    private_directory(config.data_dir)  # a new data directory is 0700, its store files 0600
    token = prepare_token(config)
    supervisor = Supervisor(child_processes(config, options))
    previous = {sig: signal.signal(sig, supervisor.request_stop)
                for sig in (signal.SIGINT, signal.SIGTERM)}

    def err(text: str) -> None:
        print(text, file=sys.stderr, flush=True)

    try:
        supervisor.start()
        up = wait_until_healthy(options.base_url, options.ready_timeout_s,
                                lambda: supervisor.all_alive() and not supervisor.stopping)
        if supervisor.stopping:
            return 0
        if not up:
            err(f"ballast: the API did not come up on {options.base_url} (port in use?)")
            for child in supervisor.children:
                tail = child.log_path.read_text(errors="replace").splitlines()[-15:]
                err(f"--- {child.log_path} (last lines) ---\n" + "\n".join(tail))
            return 3
        where = (f"store and broker in {config.data_dir}" if config.layout == "embedded"
                 else f"Redis at {printable_url(config.redis_url or '')}")
        out(f"ballast is serving at {options.base_url} ({config.layout}: {where})")
        out(f"token: {token}")
        out(f"logs: {config.data_dir / 'logs'}")
        out(f"try: curl -H 'Authorization: Bearer {token}' {options.base_url}/v1/batches")
        if options.demo:
            from service.demo_run import run_demo

            run_demo(options.base_url, token, config.data_dir / "demo", out,
                     should_stop=lambda: supervisor.stopping)
        if not supervisor.stopping:
            out("press Ctrl-C to stop")
        sys.stdout.flush()
        last_check = 0.0
        while not supervisor.stopping:
            if time.monotonic() - last_check >= 0.5:
                if not supervisor.keep_alive(err):
                    return 3
                last_check = time.monotonic()
            time.sleep(POLL_S)
        return 0
    finally:
        if supervisor.stop_signal is not None:
            name = signal.Signals(supervisor.stop_signal).name
            out(f"ballast: {name} received; stopping (at most {STOP_TOTAL_S:g} s)")
        supervisor.stopping = True
        has_worker = options.worker_processes > 0
        supervisor.stop(busy=has_worker and running_checks(config) > 0)
        cancelled = running_checks(config) if has_worker else 0
        out("ballast: stopped" + (f"; {cancelled} check(s) were still running: they run again "
                                  "when a worker next starts" if cancelled else ""))
        for signum, handler in previous.items():
            signal.signal(signum, handler)
