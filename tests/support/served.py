"""``ballast serve`` as a child process for the tests that run it as a user does: its
environment (a private data directory and port, no inherited ``BALLAST_`` settings) and its
stdout read line by line."""

from __future__ import annotations

import os
import queue
import re
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

BALLAST = str(Path(sys.executable).with_name("ballast"))


def serve_env(data_dir: Path, port: int) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("BALLAST_")}
    env.update({"BALLAST_DATA_DIR": str(data_dir), "BALLAST_PORT": str(port),
                "PYTHONUNBUFFERED": "1"})
    return env


class Served:
    """A ``ballast serve`` child whose stdout is read line by line (by a reader thread)."""

    def __init__(self, argv: list[str], env: dict[str, str]) -> None:
        self.stderr_path = Path(env["BALLAST_DATA_DIR"]).with_name(f"serve-{time.time_ns()}.err")
        with self.stderr_path.open("w") as stderr:  # a file: a full pipe would stall the child
            self.process = subprocess.Popen(argv, env=env, stdout=subprocess.PIPE, stderr=stderr,
                                            text=True)
        self.lines: list[str] = []
        self._queue: queue.Queue[str | None] = queue.Queue()
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()

    def _read(self) -> None:
        assert self.process.stdout is not None
        for line in self.process.stdout:
            self._queue.put(line.rstrip("\n"))
        self._queue.put(None)

    def read_until(self, pattern: str, timeout_s: float) -> re.Match[str]:
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            try:
                line = self._queue.get(timeout=1.0)
            except queue.Empty:
                continue
            if line is None:
                break
            self.lines.append(line)
            match = re.search(pattern, line)
            if match:
                return match
        raise AssertionError(f"no line matching {pattern!r}; stdout so far:\n"
                             + "\n".join(self.lines) + "\nstderr:\n" + self.stderr_now())

    def stderr_now(self) -> str:
        return self.stderr_path.read_text(errors="replace")

    def interrupt(self, timeout_s: float = 60) -> int:
        self.process.send_signal(signal.SIGINT)
        code = self.process.wait(timeout=timeout_s)
        self._drain()
        return code

    def kill(self) -> None:
        if self.process.poll() is None:
            self.process.kill()
            self.process.wait()
        self._drain()

    def _drain(self) -> None:
        """Keep the remaining output, then close the pipes."""
        self._reader.join(timeout=10)
        while True:
            try:
                line = self._queue.get_nowait()
            except queue.Empty:
                break
            if line is not None:
                self.lines.append(line)
        if self.process.stdout is not None and not self.process.stdout.closed:
            self.process.stdout.close()
