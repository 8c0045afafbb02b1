"""``ballast serve``: the API (gunicorn) and a worker as child processes of one command.

Without ``BALLAST_REDIS_URL`` this is the embedded default: the store and the broker are SQLite
files under the data directory, so accepted checks survive a restart. With it, the same processes
use Redis and this host simply joins a distributed deployment.

The supervisor prints the base URL and the token, restarts a child that dies (at most
``MAX_RESTARTS`` times a minute), and on SIGINT/SIGTERM stops the API, then lets the worker finish
its running checks (warm shutdown) for ``STOP_GRACE_S`` before stopping it harder.
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
STOP_GRACE_S = 20.0
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

    def signal(self, signum: int) -> None:
        if self.alive():
            assert self.process is not None
            try:
                os.killpg(self.process.pid, signum)  # its own session: the pool children too
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
        name = f"ballast-{config.layout}-{os.getpid()}@{os.uname().nodename}"
        children.append(Child("worker", worker_argv(options.worker_processes, name), env,
                              logs / "worker.log"))
    api_argv = [
        sys.executable, "-m", "gunicorn", "-c", "python:service.gunicorn_conf",
        "--bind", f"{options.host}:{options.port}", "--workers", str(options.api_processes),
        "service.app:create_app()",
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

    def request_stop(self, signum: int, _frame: object) -> None:
        self.stopping = True

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

    def stop(self) -> None:
        api = [c for c in self.children if c.name == "api"]
        workers = [c for c in self.children if c.name != "api"]
        for child in api:
            child.signal(signal.SIGTERM)
        for child in workers:
            child.signal(signal.SIGTERM)  # Celery: warm shutdown, running checks finish
        for child in workers + api:
            if not child.wait(STOP_GRACE_S):
                child.signal(signal.SIGQUIT)  # Celery: cold shutdown
                if not child.wait(5.0):
                    child.signal(signal.SIGKILL)
                    child.wait(5.0)


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
        if not wait_until_healthy(options.base_url, options.ready_timeout_s, supervisor.all_alive):
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
        out("press Ctrl-C to stop")
        sys.stdout.flush()
        while not supervisor.stopping:
            if not supervisor.keep_alive(err):
                return 3
            time.sleep(0.5)
        return 0
    finally:
        supervisor.stopping = True
        supervisor.stop()
        for signum, handler in previous.items():
            signal.signal(signum, handler)
