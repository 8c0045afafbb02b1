"""Engine speed against the numpy floor; prints ratios (a benchmark, not a test).

    python -m tests.benchmarks.bench_engine [--points 2001] [--repeats 15] [--profile]

The case: a two-stage amplifier (lumped MNA data, workers.lumped) with ports at the input, the
output and every device terminal: (F, N) = (2001, 8), 2 devices. The engine's time is one
``run_check`` with ``refine=False`` (every indicator on the samples: NDF, return differences,
encirclement counts, driving-point admittances, Kurokawa points, two-port factors, verdict).
The floor is a batched ``np.linalg.inv`` plus ``np.linalg.slogdet`` of the same (F, N, N)
stack, timed in the same run. Best of ``repeats`` for each. Target ratio <= 3 (issue 2).
The full check with the model refinement (the default) is timed once for information.
"""

from __future__ import annotations

import argparse
import cProfile
import io
import pstats
import time
from collections.abc import Callable
from dataclasses import replace

import numpy as np

from tests.support.circuits import PortSpec
from tests.support.requests import engine_request
from workers.engine import CheckOptions, run_check
from workers.engine.request import CheckRequest
from workers.lumped import VCCS, Capacitor, Circuit, Inductor, Resistor

TARGET_RATIO = 3.0


def two_stage_amplifier() -> tuple[Circuit, list[PortSpec]]:
    """Two common-source stages with source inductance, drain-gate feedback and bias resistors."""
    elements = [
        Resistor("Rin", "in", "g0", 10.0),
        Resistor("Rfb", "d1", "g0", 2e3),
        Inductor("Lmid", "d0", "g1", 1e-9),
        Resistor("Rout", "d1", "out", 5.0),
    ]
    for k in (0, 1):
        g, d, s = f"g{k}", f"d{k}", f"s{k}"
        elements += [
            Capacitor(f"Cgs{k}", g, s, 0.4e-12), Capacitor(f"Cgd{k}", g, d, 0.05e-12),
            Capacitor(f"Cds{k}", d, s, 0.1e-12), Resistor(f"Rds{k}", d, s, 300.0),
            Inductor(f"Ls{k}", s, "0", 0.1e-9), Resistor(f"Rs{k}", s, "0", 2.0),
            Resistor(f"Rg{k}", g, "0", 1e3), Inductor(f"Ld{k}", d, "0", 5e-9),
            VCCS(f"Q{k}", (g, s), (d, s), 0.08),
        ]
    for node in ("in", "out", "g0", "d0", "s0", "g1", "d1", "s1"):
        elements.append(Capacitor(f"Cp_{node}", node, "0", 0.05e-12))
    ports = [PortSpec("in", "in", "external"), PortSpec("out", "out", "external")]
    for k in (0, 1):
        ports += [PortSpec(f"gate{k}", f"g{k}", "probe"), PortSpec(f"drain{k}", f"d{k}", "probe"),
                  PortSpec(f"source{k}", f"s{k}", "probe")]
    return Circuit(tuple(elements)), ports


def timed(work: Callable[[], object]) -> float:
    start = time.perf_counter()
    work()
    return time.perf_counter() - start


def best_of_interleaved(repeats: int, *works: Callable[[], object]) -> list[float]:
    """Best time of each piece of work, run in turn ``repeats`` times (so that a busy machine
    slows every piece alike)."""
    times = [[] for _ in works]
    for _ in range(repeats):
        for slot, work in zip(times, works, strict=True):
            slot.append(timed(work))
    return [min(slot) for slot in times]


def numpy_floor(stack: np.ndarray) -> None:
    np.linalg.inv(stack)
    np.linalg.slogdet(stack)


def build_request(points: int) -> CheckRequest:
    circuit, ports = two_stage_amplifier()
    f = np.geomspace(1e6, 200e9, points)
    return engine_request(circuit, ports, f, options=CheckOptions(refine=False))


def profile(request: CheckRequest, top: int = 30) -> str:
    """cProfile of 10 run_check calls, by own time and by cumulative time."""
    profiler = cProfile.Profile()
    profiler.enable()
    for _ in range(10):
        run_check(request)
    profiler.disable()
    out = io.StringIO()
    stats = pstats.Stats(profiler, stream=out)
    stats.sort_stats("tottime").print_stats(top)
    stats.sort_stats("cumulative").print_stats(top)
    return out.getvalue()


def breakdown(request: CheckRequest, repeats: int) -> list[tuple[str, float]]:
    """Best times of the engine's stages, interleaved with the floor (same inputs as run_check)."""
    from workers.engine import check, conversions, external, loops, nodes
    from workers.engine.decide import decide

    state = check.circuit_state(request, [])
    analysis = check.analyse(request)
    z_on = conversions.batched_inv(state.y_on)
    two_port, _ = external.two_port_report(request, state.y_data, [], analysis.z_on)
    stack = np.ascontiguousarray(request.network.values)
    stages: list[tuple[str, Callable[[], object]]] = [
        ("numpy floor: inv + slogdet", lambda: numpy_floor(stack)),
        ("circuit_state (Y_on, Y_off, stamps)", lambda: check.circuit_state(request, [])),
        ("  device_stamp", lambda: conversions.device_stamp(state.gains, state.u, state.v)),
        ("inverse of Y_on", lambda: conversions.batched_inv(state.y_on)),
        ("loops.loops_from_impedance", lambda: loops.loops_from_impedance(
            z_on.values, z_on.singular, state.gains, state.u, state.v)),
        ("nodes.node_analysis", lambda: nodes.node_analysis(request.frequency_hz, z_on)),
        ("external.two_port_report (Woodbury)", lambda: external.two_port_report(
            request, state.y_data, [], analysis.z_on)),
        ("check.analyse (total)", lambda: check.analyse(request)),
        ("decide", lambda: decide(analysis, two_port, extra=[])),
        ("run_check (refine=False)", lambda: run_check(request)),
    ]
    best = best_of_interleaved(repeats, *(work for _, work in stages))
    return [(name, t) for (name, _), t in zip(stages, best, strict=True)]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=2001)
    parser.add_argument("--repeats", type=int, default=15)
    parser.add_argument("--profile", action="store_true", help="print a cProfile of run_check")
    parser.add_argument("--breakdown", action="store_true", help="time the engine's stages")
    args = parser.parse_args()

    request = build_request(args.points)
    stack = np.ascontiguousarray(request.network.values)
    run_check(request)  # warm-up (imports, caches)
    numpy_floor(stack)
    floor, engine = best_of_interleaved(args.repeats, lambda: numpy_floor(stack),
                                        lambda: run_check(request))
    verdict = run_check(request)
    ratio = engine / floor
    print(f"case: (F, N) = {stack.shape[0]}, {stack.shape[1]}; devices: {len(request.devices)}; "
          f"verdict {verdict.verdict} (count {verdict.unstable_count})")
    print(f"numpy floor (inv + slogdet), best of {args.repeats}: {floor * 1e3:8.2f} ms")
    print(f"engine run_check (refine=False), best of {args.repeats}: {engine * 1e3:8.2f} ms")
    print(f"ratio engine / floor: {ratio:.2f} (target <= {TARGET_RATIO:g}: "
          f"{'met' if ratio <= TARGET_RATIO else 'NOT met'})")
    full = replace(request, options=CheckOptions())
    refined = timed(lambda: run_check(full))
    print(f"engine run_check (default, refine=True), once:   {refined * 1e3:8.2f} ms "
          f"(ratio {refined / floor:.1f})")
    if args.breakdown or ratio > TARGET_RATIO:
        print("stage times (best of each, interleaved; relative to the floor timed with them):")
        stages = breakdown(request, args.repeats)
        reference = stages[0][1]
        for name, t in stages:
            print(f"  {name:45s} {t * 1e3:8.2f} ms  ({t / reference:5.2f} x floor)")
    if args.profile or ratio > TARGET_RATIO:
        print(profile(request))


if __name__ == "__main__":
    main()
