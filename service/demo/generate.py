"""Write the invented demo scenario: variants of two amplifiers as Touchstone files.

``python -m service.demo.generate OUT_DIR`` writes, for each variant, an 8-port ``.s8p`` file
(external ports first, then probe ports at the FET terminals), one port/device map per
topology (``lna_map.json``, ``pa_map.json``: the ``ports`` and ``devices`` parts of a check
request), ``truth.json`` (natural frequencies from scipy.linalg.eig on the lumped circuits)
and ``README.txt``. The data are simulated from :mod:`workers.lumped.families`; nothing is
measured and nothing is random.
"""

from __future__ import annotations

import argparse
import json
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np

from workers.lumped.checkdata import s_from_y, to_touchstone
from workers.lumped.families import CircuitCase, combined_power_stage, two_stage_lna
from workers.lumped.mna import natural_mode, normalized_determinant, port_admittance

Z0_OHM = 50.0
START_HZ, STOP_HZ, POINTS = 1e6, 1e12, 1001
"""Log grid, 6 decades at ~167 points per decade (1.4 % steps). The top is 1 THz because a
lumped VCCS makes NDF − 1 fall only as 1/f: at 100 GHz it is still 14 % off its limit here,
at 1 THz about 1 %."""

Topology = Literal["lna", "pa"]


@dataclass(frozen=True)
class Variant:
    """One demo file: a topology, its knob settings and a one-line story."""

    stem: str
    topology: Topology
    story: str
    knobs: dict[str, float | bool | None] = field(default_factory=dict)

    def build(self) -> CircuitCase:
        builder = two_stage_lna if self.topology == "lna" else combined_power_stage
        return builder(**self.knobs)


VARIANTS: tuple[Variant, ...] = (
    Variant("lna_nominal", "lna", "as designed: 100 ohm in the first gate DC return"),
    Variant(
        "lna_no_gate_damping",
        "lna",
        "first-stage gate return choke wired straight to ground (damping resistor left off)",
        {"gate_return_damping_ohm": None},
    ),
    Variant(
        "lna_gate_damping_10ohm",
        "lna",
        "gate return damping resistor fitted as 10 ohm instead of 100 ohm",
        {"gate_return_damping_ohm": 10.0},
    ),
    Variant(
        "lna_gate_damping_220ohm",
        "lna",
        "gate return damping resistor raised to 220 ohm",
        {"gate_return_damping_ohm": 220.0},
    ),
    Variant(
        "lna_no_output_stabiliser",
        "lna",
        "second-stage drain R-C stabiliser removed",
        {"output_stabiliser": False},
    ),
    Variant(
        "lna_long_source_via",
        "lna",
        "first-stage source via of 1 nH instead of 0.25 nH",
        {"source_via_h": 1e-9},
    ),
    Variant("pa_nominal", "pa", "as designed: 20 ohm between the two drains"),
    Variant(
        "pa_no_odd_resistor",
        "pa",
        "drain-to-drain resistor left off",
        {"odd_mode_ohm": None},
    ),
    Variant(
        "pa_odd_resistor_1kohm",
        "pa",
        "drain-to-drain resistor fitted as 1 kohm instead of 20 ohm",
        {"odd_mode_ohm": 1000.0},
    ),
    Variant(
        "pa_odd_resistor_50ohm",
        "pa",
        "drain-to-drain resistor fitted as 50 ohm",
        {"odd_mode_ohm": 50.0},
    ),
    Variant(
        "pa_long_lines",
        "pa",
        "2 nH gate and drain lines per cell, 20 ohm drain-to-drain resistor",
        {"line_h": 2e-9},
    ),
    Variant(
        "pa_long_lines_no_odd_resistor",
        "pa",
        "2 nH gate and drain lines per cell, drain-to-drain resistor left off",
        {"line_h": 2e-9, "odd_mode_ohm": None},
    ),
    Variant(
        "pa_no_gate_damping",
        "pa",
        "gate return choke wired straight to ground (damping resistor left off)",
        {"gate_return_damping_ohm": None},
    ),
)


def demo_frequency_hz() -> np.ndarray:
    """The demo frequency grid (Hz)."""
    return np.geomspace(START_HZ, STOP_HZ, POINTS)


def port_map(case: CircuitCase) -> dict:
    """The ``ports`` and ``devices`` parts of the check request of ``case`` (port names)."""
    request = case.check_request(np.array([1e9, 2e9, 3e9]), parameter="Y")
    return {"ports": request["ports"], "devices": request["devices"]}


def _external_weight(case: CircuitCase, s: complex) -> float:
    """How strongly a natural mode shows at the external ports: min of the largest right and
    left null-vector weights at the external port nodes (0 = invisible from outside)."""
    right, left = natural_mode(case.circuit, s, case.terminations)
    external = [node for _, node, role in case.ports if role == "external"]
    return float(min(max(abs(right[n]) for n in external), max(abs(left[n]) for n in external)))


def _mode_name(case: CircuitCase, s: complex) -> str:
    right, _ = natural_mode(case.circuit, s, case.terminations)
    if "d_a" in right:
        ratio = right["d_b"] / right["d_a"] if abs(right["d_a"]) > 0 else 0.0
        return "odd" if abs(ratio + 1) < 1e-6 else "even" if abs(ratio - 1) < 1e-6 else "mixed"
    return "single-ended"


def truth_entry(variant: Variant, case: CircuitCase, frequency_hz: np.ndarray) -> dict:
    """Ground truth of one variant: natural frequencies, RHP ones with their mode and
    visibility from the external ports, and how close the NDF is to its limits at the grid ends."""
    s = case.natural_frequencies()
    growing = s[(s.real > 0) & (s.imag >= 0)]
    ends = normalized_determinant(
        case.circuit,
        np.array([0.0, frequency_hz[0], frequency_hz[-1], 1e3 * frequency_hz[-1]]),
        case.terminations,
    )
    return {
        "file": f"{variant.stem}.s{len(case.ports)}p",
        "topology": variant.topology,
        "story": variant.story,
        "knobs": variant.knobs,
        "oscillates": bool(growing.size),
        "natural_frequencies_hz": [
            {"re": float(x.real / (2 * np.pi)), "im": float(x.imag / (2 * np.pi))} for x in s
        ],
        "unstable": [
            {
                "re_hz": float(x.real / (2 * np.pi)),
                "frequency_hz": float(x.imag / (2 * np.pi)),
                "mode": _mode_name(case, x),
                "external_port_weight": _external_weight(case, x),
            }
            for x in growing
        ],
        "slowest_decay_hz": float(-s.real.max() / (2 * np.pi)) if not growing.size else None,
        "ndf_closure": {
            "low": float(abs(ends[1] - ends[0]) / abs(ends[0])),
            "high": float(abs(ends[2] - ends[3]) / abs(ends[3])),
        },
    }


README = """\
ballast demo data (invented)
============================

Everything here is simulated from small lumped circuits (workers/lumped/families.py); no
part, product or measurement is behind it. Frequencies: {points} points, log-spaced from
{start:g} Hz to {stop:g} Hz. S parameters, Touchstone v1, RI, reference {z0:g} ohm.

Two invented amplifiers, each with probe ports at its transistor terminals:

* lna_*.s8p - a two-stage self-biased 4-6 GHz LNA. Ports: in, out (external, 50 ohm),
  g1 s1 d1 g2 s2 d2 (probes at gate, source, drain of each FET). Map: lna_map.json.
  The first FET's gate DC return is a 470 nH choke with a series damping resistor; the
  variants change that resistor, the output stabiliser and a source via.
* pa_*.s8p - a 2.5 GHz power stage of two identical FET cells in parallel (input split,
  output combined). Ports: in, out (external, 50 ohm), g_a s_a d_a g_b s_b d_b (probes).
  Map: pa_map.json. A resistor between the two drains suppresses the odd mode (cells in
  antiphase), which the external ports cannot see: every pa variant with the same lines has
  identical in/out two-port data whatever that resistor is.

Variants:
{variants}

truth.json holds the natural frequencies of every variant (scipy.linalg.eig on the circuit
with 50 ohm at in and out), which of them grow, their mode and how visible they are from the
external ports. A check request is: the .s8p text as "touchstone" plus the map's "ports" and
"devices".
"""


def generate_demo(folder: Path) -> list[Path]:
    """Write the demo scenario into ``folder`` (created if needed); returns the paths written."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    frequency_hz = demo_frequency_hz()
    written: list[Path] = []
    truth: dict = {
        "grid": {"start_hz": START_HZ, "stop_hz": STOP_HZ, "points": POINTS, "spacing": "log"},
        "z0_ohm": Z0_OHM,
        "variants": {},
    }
    maps: dict[str, dict] = {}
    for variant in VARIANTS:
        case = variant.build()
        y = port_admittance(case.circuit, case.port_nodes, frequency_hz)
        comments = [
            f"ballast invented demo data: {variant.stem}",
            f"{variant.story}",
            "ports: " + " ".join(f"{name}({role})" for name, _, role in case.ports),
        ]
        path = folder / f"{variant.stem}.s{len(case.ports)}p"
        path.write_text(to_touchstone(frequency_hz, s_from_y(y, Z0_OHM), Z0_OHM, comments))
        written.append(path)
        maps.setdefault(variant.topology, port_map(case))
        truth["variants"][variant.stem] = truth_entry(variant, case, frequency_hz)
    for topology, mapping in maps.items():
        path = folder / f"{topology}_map.json"
        path.write_text(json.dumps(mapping, indent=2) + "\n")
        written.append(path)
    truth_path = folder / "truth.json"
    truth_path.write_text(json.dumps(truth, indent=2) + "\n")
    written.append(truth_path)
    readme = folder / "README.txt"
    lines = [f"* {v.stem}: {v.story}" for v in VARIANTS]
    readme.write_text(
        README.format(
            points=POINTS, start=START_HZ, stop=STOP_HZ, z0=Z0_OHM, variants="\n".join(lines)
        )
    )
    written.append(readme)
    return written


def main(argv: Sequence[str] | None = None) -> int:
    """Command line: ``python -m service.demo.generate OUT_DIR``."""
    parser = argparse.ArgumentParser(description="Write the invented ballast demo scenario.")
    parser.add_argument("out_dir", type=Path)
    args = parser.parse_args(argv)
    for path in generate_demo(args.out_dir):
        print(path)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
