"""How often a flow's own sweep decides, and how many sweeps ``next_sweep`` costs otherwise.

    python -m tests.benchmarks.bench_bands [--per-family 30] [--form realistic|wide]

On the generated suite of ``tests.support.sweeps`` (truth: eig on the MNA pencil) it prints, for
the first pass, the share of circuits decided, separately for stable and unstable ones (decided:
a ``stable`` or ``unstable`` verdict a gate can act on; final: also ``count_complete``, no
``next_sweep``); how many further sweeps following ``next_sweep`` took; wrong final verdicts; and
false ``stable`` verdicts on any pass (which must be 0). Prints figures only.
"""

from __future__ import annotations

import argparse
import collections
import time

from workers.threads import pin_engine_threads


def main() -> None:
    import os

    pin_engine_threads(os.environ)
    from tests.support.sweeps import follow, suite

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--per-family", type=int, default=30)
    parser.add_argument("--form", choices=("realistic", "wide"), default="realistic")
    args = parser.parse_args()
    decided = collections.Counter()
    final_first = collections.Counter()
    total = collections.Counter()
    sweeps = collections.Counter()
    false_stable = wrong_final = checks = 0
    start = time.perf_counter()
    for circuit in suite(args.per_family):
        f = circuit.realistic_hz if args.form == "realistic" else circuit.wide_hz
        run = follow(circuit, f)
        checks += len(run.verdicts)
        kind = "unstable" if circuit.rhp_count else "stable"
        total[kind] += 1
        decided[kind] += run.verdicts[0].verdict != "indeterminate"
        final_first[kind] += run.verdicts[0].next_sweep is None
        sweeps[run.sweeps_needed if run.final.next_sweep is None else "not final"] += 1
        false_stable += sum(v.verdict == "stable" for v in run.verdicts) if circuit.rhp_count \
            else 0
        right = (run.final.verdict == kind and run.final.count_complete
                 and run.final.unstable_count == circuit.rhp_count)
        wrong_final += not right
    elapsed = time.perf_counter() - start
    print(f"{sum(total.values())} circuits ({args.form} sweeps), {checks} checks in "
          f"{elapsed:.1f} s")
    for kind in ("stable", "unstable"):
        n = total[kind] or 1
        print(f"first pass, {kind:8s}: decided {decided[kind]:3d} / {total[kind]:3d} = "
              f"{decided[kind] / n:.2f}; final {final_first[kind]:3d} / {total[kind]:3d} = "
              f"{final_first[kind] / n:.2f}")
    for key in sorted(sweeps, key=str):
        print(f"further sweeps needed {key!s:>9}: {sweeps[key]}")
    print(f"wrong final verdicts: {wrong_final}")
    print(f"false stable (any pass): {false_stable}   (must be 0)")


if __name__ == "__main__":
    main()
