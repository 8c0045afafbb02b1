"""The API under a real gunicorn, started the way deployments start it
(``gunicorn -c python:service.gunicorn_conf 'service.app:create_app()'``), on the embedded SQLite
store and broker in a folder of the test's, with one tenant's token made beforehand.
"""

from __future__ import annotations

import http.client
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

from service.auth import create_token
from tests.support.queue_harness import free_port
from workers.store import open_stores


class ApiServer:
    """``with ApiServer(folder, BALLAST_MAX_BODY_BYTES="4096") as api: api.port, api.token``."""

    def __init__(self, folder: Path, processes: int = 1, threads: int = 4,
                 **settings: str) -> None:
        self.folder = folder
        self.folder.mkdir(parents=True, exist_ok=True)
        self.port = free_port()
        store = self.folder / "store.sqlite3"
        stores = open_stores(f"sqlite:///{store}")
        try:
            self.token = create_token(stores.access, "acme")
        finally:
            stores.close()
        self.env = {k: v for k, v in os.environ.items() if not k.startswith("BALLAST_")}
        self.env.update({"BALLAST_DATA_DIR": str(self.folder),
                         "BALLAST_STORE_URL": f"sqlite:///{store}",
                         "BALLAST_API_PROCESSES": str(processes),
                         "BALLAST_API_THREADS": str(threads), **settings})
        self.log_path = self.folder / "gunicorn.log"
        self.process: subprocess.Popen[bytes] | None = None

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def __enter__(self) -> ApiServer:
        with self.log_path.open("ab") as log:
            self.process = subprocess.Popen(
                [sys.executable, "-m", "gunicorn", "-c", "python:service.gunicorn_conf",
                 "--bind", f"127.0.0.1:{self.port}", "service.app:create_app()"],
                env=self.env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
        deadline = time.monotonic() + 60
        while not self._healthy():
            if self.process.poll() is not None or time.monotonic() > deadline:
                self.__exit__(None, None, None)
                raise RuntimeError(f"gunicorn did not start: {self.log_tail()}")
            time.sleep(0.2)
        return self

    def _healthy(self) -> bool:
        connection = http.client.HTTPConnection("127.0.0.1", self.port, timeout=2)
        try:
            connection.request("GET", "/healthz")
            return connection.getresponse().status == 200
        except OSError:
            return False
        finally:
            connection.close()

    def worker_pids(self) -> list[int]:
        """The gunicorn worker processes (children of the arbiter)."""
        assert self.process is not None
        children = Path(f"/proc/{self.process.pid}/task/{self.process.pid}/children")
        return [int(p) for p in children.read_text().split()]

    def log_tail(self, lines: int = 40) -> str:
        return "\n".join(self.log_path.read_text(errors="replace").splitlines()[-lines:])

    def __exit__(self, *exc: object) -> None:
        if self.process is None:
            return
        if self.process.poll() is None:
            self.process.send_signal(signal.SIGTERM)  # gunicorn: graceful stop
            try:
                self.process.wait(timeout=30)
            except subprocess.TimeoutExpired:
                os.killpg(self.process.pid, signal.SIGKILL)
                self.process.wait(timeout=10)
        self.process = None
