"""The demo that ``ballast serve --demo`` runs: invented variants in, verdicts out, over HTTP.

``service.demo.generate.generate_demo(folder)`` writes Touchstone files and one map per circuit
family (``<family>_map.json``); each family goes in as one multipart batch, as a design flow
would send it, and every verdict is printed when the batch has finished.
"""

from __future__ import annotations

import json
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


def verdict_line(item: dict[str, Any]) -> str:
    """One printed line per check: label, status or verdict, count and first offending mode."""
    verdict = item.get("verdict") or item.get("status")
    count = item.get("unstable_count")
    where = ""
    if item.get("first_unstable_frequency_hz") is not None:
        node = item.get("first_unstable_node") or "?"
        where = f"  first at {_frequency(item['first_unstable_frequency_hz'])} (node {node})"
    count_text = "" if count is None else f"  right-half-plane natural frequencies: {count}"
    return f"  {item.get('label') or item['id']:<32} {verdict:<14}{count_text}{where}"


def run_demo(
    base_url: str, token: str, folder: Path, out: Callable[[str], None] = print,
    should_stop: Callable[[], bool] = lambda: False,
) -> Counter[str]:
    """Generate the demo data, submit it, wait, print every verdict; returns the verdict counts."""
    from service.demo.generate import generate_demo

    folder.mkdir(parents=True, exist_ok=True)
    paths = [Path(p) for p in generate_demo(folder)]
    client = BallastClient(ClientConfig(url=base_url, token=token))
    totals: Counter[str] = Counter()
    for family, mapping, files in family_batches(paths, folder):
        if should_stop():
            break
        accepted = client.submit_touchstone_batch(files, mapping, label=f"demo {family}")
        out(f"demo: submitted {len(files)} {family} variants as batch {accepted['id']}")
        client.wait_batch(accepted["id"], timeout_s=DEMO_TIMEOUT_S)
        for item in client.iter_batch_checks(accepted["id"]):
            out(verdict_line(item))
            totals[item.get("verdict") or item.get("status") or "unknown"] += 1
    summary = ", ".join(f"{n} {name}" for name, n in sorted(totals.items()))
    out(f"demo finished: {sum(totals.values())} checks ({summary})")
    return totals
