"""Touchstone reading speed: ballast's parse_touchstone against scikit-rf 2.2's reader.

Writes a seeded random 4-port, 2001-point S-parameter file (Touchstone 1.0, RI, written by
scikit-rf) to a temporary folder and times the readers in interleaved rounds (time.perf_counter),
so that machine load hits all of them alike. Prints the best time of each, their ratio and the
median per-round ratio. Goal: ballast at least 3x faster than skrf.Network(file).
Run: python -m tests.benchmarks.bench_touchstone
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
REPEATS = 21
SEED = 20261202


def _timed(action: Callable[[], object]) -> float:
    start = time.perf_counter()
    action()
    return time.perf_counter() - start


def _interleaved(actions: list[Callable[[], object]], repeats: int) -> np.ndarray:
    """(repeats, len(actions)) seconds; each round runs every reader once, so load hits all."""
    return np.array([[_timed(action) for action in actions] for _ in range(repeats)])


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
        times = _interleaved([ours, reference_network, reference_reader], REPEATS)
        size_kb = path.stat().st_size / 1024
    t_ours, t_network, t_reader = times.min(axis=0)
    round_ratio = np.median(times[:, 1] / times[:, 0])
    print(f"file: {PORTS}-port, {POINTS} points, RI, {size_kb:.0f} KiB (best of {REPEATS})")
    print(f"ballast parse_touchstone (read + parse)   {t_ours * 1e3:8.2f} ms")
    print(f"skrf.Network(file)                        {t_network * 1e3:8.2f} ms")
    print(f"skrf.io.touchstone.Touchstone(file)       {t_reader * 1e3:8.2f} ms")
    print(f"ratio skrf.Network / ballast              {t_network / t_ours:8.2f}x  (goal >= 3x)")
    print(f"ratio skrf Touchstone reader / ballast    {t_reader / t_ours:8.2f}x")
    print(f"median per-round ratio skrf.Network / ballast {round_ratio:5.2f}x")


if __name__ == "__main__":
    main()
