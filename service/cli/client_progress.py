"""The progress line of ``ballast submit --wait`` (stderr): done/total, verdicts so far, rate.

On a terminal the line is redrawn in place; otherwise (CI logs) a plain line is printed when the
count changes, at most every ``log_every_s`` seconds, and once at the end.
"""

from __future__ import annotations

import sys
import time
from typing import TextIO

from service.client import BatchProgress

BAR_WIDTH = 24
_ORDER = ("stable", "unstable", "indeterminate")


def progress_line(progress: BatchProgress, width: int = BAR_WIDTH) -> str:
    """'[########················]  12/40 │ stable 9 · unstable 2 · indeterminate 1 │
    186 checks/min │ ~9 s left' (on one line)."""
    total = max(progress.total, 1)
    filled = round(width * progress.finished / total)
    bar = "#" * filled + "·" * (width - filled)
    counts = [f"{name} {progress.by_verdict.get(name, 0)}" for name in _ORDER]
    failed = progress.by_status.get("failed", 0) + progress.by_status.get("cancelled", 0)
    if failed:
        counts.append(f"failed/cancelled {failed}")
    rate = progress.rate_per_s
    remaining = progress.total - progress.finished
    eta = f" │ ~{duration(remaining / rate)} left" if rate > 0 and remaining > 0 else ""
    return (f"[{bar}] {progress.finished:>{len(str(progress.total))}}/{progress.total} │ "
            + " · ".join(counts) + f" │ {format_rate(rate)}{eta}")


def format_rate(per_s: float) -> str:
    """Always per minute, so that the number is comparable while it changes: '192 checks/min',
    '4.5 checks/min', '0.083 checks/min' (two significant digits below 10)."""
    per_min = per_s * 60.0
    return f"{per_min:.0f} checks/min" if per_min >= 10 else f"{per_min:.2g} checks/min"


def duration(seconds: float) -> str:
    """'42 s', '3 min 05 s', '2 h 10 min'."""
    seconds = round(seconds)
    if seconds < 90:
        return f"{seconds} s"
    if seconds < 5400:
        return f"{seconds // 60} min {seconds % 60:02d} s"
    return f"{seconds // 3600} h {seconds % 3600 // 60} min"


class ProgressPrinter:
    """Callable for ``BallastClient.wait_batch(on_progress=...)``."""

    def __init__(self, stream: TextIO | None = None, log_every_s: float = 5.0) -> None:
        self.stream = stream or sys.stderr
        self.live = bool(getattr(self.stream, "isatty", lambda: False)())
        self.log_every_s = log_every_s
        self._last_finished = -1
        self._last_time = 0.0
        self._width = 0

    def __call__(self, progress: BatchProgress) -> None:
        line = progress_line(progress)
        done = progress.finished >= progress.total
        if self.live:
            pad = max(0, self._width - len(line))
            self.stream.write("\r" + line + " " * pad + ("\n" if done else ""))
            self._width = len(line)
            self.stream.flush()
            return
        now = time.monotonic()
        changed = progress.finished != self._last_finished
        if done or (changed and now - self._last_time >= self.log_every_s):
            self.stream.write(line + "\n")
            self.stream.flush()
            self._last_finished = progress.finished
            self._last_time = now
