"""The demo that ``ballast serve --demo`` runs: invented variants in, verdicts out, over HTTP.

``service.demo.generate.generate_demo(folder)`` writes Touchstone files and one map per circuit
family (``<family>_map.json``); each family goes in as one multipart batch, as a design flow
would send it, and every verdict is printed when the batch has finished; the last lines say where
the files are and where each batch's report is served.
"""

from __future__ import annotations

import json
import time
from collections import Counter
from collections.abc import Callable
from pathlib import Path
from typing import Any

from service.client import BallastClient, ClientConfig

DEMO_TIMEOUT_S = 600.0


def family_batches(paths: list[Path], folder: Path) -> list[tuple[str, dict[str, Any], list[Path]]]:
    """(family, map, Touchstone files) for every ``<family>_map.json`` in ``folder``."""
    batches = []
    for map_path in sorted(folder.glob("*_map.json")):
        family = map_path.name.removesuffix("_map.json")
        files = sorted(
            p for p in paths
            if p.name.startswith(family) and p.suffix.lower().startswith(".s")
            and p.suffix.lower().endswith("p")
        )
        if files:
            batches.append((family, json.loads(map_path.read_text()), files))
    return batches


def _frequency(value: float | None) -> str:
    if value is None:
        return "-"
    for scale, unit in ((1e9, "GHz"), (1e6, "MHz"), (1e3, "kHz")):
        if abs(value) >= scale:
            return f"{value / scale:.4g} {unit}"
    return f"{value:.4g} Hz"


def verdict_line(item: dict[str, Any], label_width: int = 32) -> str:
    """One printed line per check: label (padded to ``label_width``), status or verdict, count
    and first offending mode."""
    verdict = item.get("verdict") or item.get("status")
    count = item.get("unstable_count")
    where = ""
    if item.get("first_unstable_frequency_hz") is not None:
        node = item.get("first_unstable_node") or "?"
        where = f"  first at {_frequency(item['first_unstable_frequency_hz'])} (node {node})"
    count_text = "" if count is None else f"  right-half-plane natural frequencies: {count}"
    return f"  {item.get('label') or item['id']:<{label_width}} {verdict:<14}{count_text}{where}"


class DemoInterruptedError(Exception):
    """The service was asked to stop while the demo was waiting for verdicts."""


def stoppable_sleep(should_stop: Callable[[], bool], step_s: float = 0.05
                    ) -> Callable[[float], None]:
    """A ``sleep`` for :class:`BallastClient` that wakes every ``step_s`` and raises
    :class:`DemoInterruptedError` once ``should_stop()`` is true (seen within a step)."""

    def sleep(seconds: float) -> None:
        end = time.monotonic() + seconds
        while not should_stop():
            left = end - time.monotonic()
            if left <= 0:
                return
            time.sleep(min(step_s, left))
        raise DemoInterruptedError

    return sleep


def run_demo(
    base_url: str, token: str, folder: Path, out: Callable[[str], None] = print,
    should_stop: Callable[[], bool] = lambda: False,
) -> Counter[str]:
    """Generate the demo data, submit it, wait, print every verdict and where the files and the
    reports are; returns the verdict counts. Stops early (saying so) when ``should_stop()``."""
    from service.demo.generate import generate_demo

    folder.mkdir(parents=True, exist_ok=True)
    paths = [Path(p) for p in generate_demo(folder)]
    client = BallastClient(ClientConfig(url=base_url, token=token),
                           sleep=stoppable_sleep(should_stop))
    totals: Counter[str] = Counter()
    reports: list[str] = []
    try:
        for family, mapping, files in family_batches(paths, folder):
            if should_stop():
                raise DemoInterruptedError
            accepted = client.submit_touchstone_batch(files, mapping, label=f"demo {family}")
            out(f"demo: submitted {len(files)} {family} variants as batch {accepted['id']}")
            reports.append(f"{base_url}/v1/batches/{accepted['id']}/report")
            client.wait_batch(accepted["id"], timeout_s=DEMO_TIMEOUT_S)
            items = list(client.iter_batch_checks(accepted["id"]))
            width = max(len(item.get("label") or item["id"]) for item in items) if items else 0
            for item in items:
                out(verdict_line(item, width))
                totals[item.get("verdict") or item.get("status") or "unknown"] += 1
    except DemoInterruptedError:
        out("demo: stopped before every verdict was in")
    else:
        summary = ", ".join(f"{n} {name}" for name, n in sorted(totals.items()))
        out(f"demo finished: {sum(totals.values())} checks ({summary})")
    for line in where_lines(folder, reports):
        out(line)
    return totals


def where_lines(folder: Path, reports: list[str]) -> list[str]:
    """Where the demo's files went, and its batches' HTML reports (they need the token)."""
    maps = ", ".join(sorted(p.name for p in folder.glob("*_map.json")))
    lines = [f"demo files: {folder.resolve()} (Touchstone variants, {maps}, truth.json, "
             "README.txt)"]
    if reports:
        lines.append("demo reports (HTML; send the token as 'Authorization: Bearer'): "
                     + " ".join(reports))
    return lines
