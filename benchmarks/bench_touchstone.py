"""Touchstone reading speed: ballast's parse_touchstone against scikit-rf 2.2's reader.

Writes a seeded random 4-port, 2001-point S-parameter file (Touchstone 1.0, RI, written by
scikit-rf) to a temporary folder, times both readers (best of several runs, time.perf_counter)
and prints the ratio. Goal: ballast at least 3x faster. Run: python -m benchmarks.bench_touchstone
"""

from __future__ import annotations

import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

from workers.engine.touchstone import parse_touchstone

PORTS = 4
POINTS = 2001
REPEATS = 15
SEED = 20261202


def _best_seconds(action: Callable[[], object], repeats: int) -> float:
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        best = min(best, time.perf_counter() - start)
    return best


def _write_file(folder: Path) -> Path:
    import skrf

    rng = np.random.default_rng(SEED)
    shape = (POINTS, PORTS, PORTS)
    s = rng.normal(size=shape) + 1j * rng.normal(size=shape)
    frequency = skrf.Frequency(1.0, 20.0, POINTS, unit="GHz")
    skrf.Network(frequency=frequency, s=s, z0=50.0).write_touchstone("bench", dir=folder, form="ri")
    return folder / f"bench.s{PORTS}p"


def main() -> None:
    """Print best-of-N times of both readers on the same file and their ratio."""
    import skrf

    with tempfile.TemporaryDirectory() as folder:
        path = _write_file(Path(folder))
        name = str(path)

        def ours() -> object:
            return parse_touchstone(path.read_text(), filename=name)

        def reference_network() -> object:
            return skrf.Network(name)

        def reference_reader() -> object:
            return skrf.io.touchstone.Touchstone(name)

        mine = np.asarray(ours().values)  # type: ignore[attr-defined]
        theirs = reference_network().s  # type: ignore[attr-defined]
        assert np.allclose(mine, theirs, rtol=1e-12, atol=0.0), "readers disagree"
        ours()
        t_ours = _best_seconds(ours, REPEATS)
        t_network = _best_seconds(reference_network, REPEATS)
        t_reader = _best_seconds(reference_reader, REPEATS)
        size_kb = path.stat().st_size / 1024
    print(f"file: {PORTS}-port, {POINTS} points, RI, {size_kb:.0f} KiB (best of {REPEATS})")
    print(f"ballast parse_touchstone (read + parse)   {t_ours * 1e3:8.2f} ms")
    print(f"skrf.Network(file)                        {t_network * 1e3:8.2f} ms")
    print(f"skrf.io.touchstone.Touchstone(file)       {t_reader * 1e3:8.2f} ms")
    print(f"ratio skrf.Network / ballast              {t_network / t_ours:8.2f}x  (goal >= 3x)")
    print(f"ratio skrf Touchstone reader / ballast    {t_reader / t_ours:8.2f}x")


if __name__ == "__main__":
    main()
