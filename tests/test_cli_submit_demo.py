"""The README's flow on the demo data: generate, ``ballast submit --map --wait --junit
--report-dir``, exit 1 because a variant oscillates.

Truth: ``truth.json`` written by the demo generator from scipy.linalg.eig on each lumped circuit's
MNA pencil (an oracle independent of the engine). Two LNA variants keep the test short: the
nominal one (no right-half-plane natural frequency) and the one without its gate-return damping
resistor (one pair, near 145 MHz).
"""

from __future__ import annotations

import json
import math
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from service.cli import main
from service.demo.generate import generate_demo
from tests.client_live_server import live_server

pytestmark = pytest.mark.slow
VARIANTS = ("lna_nominal", "lna_no_gate_damping")


def test_demo_lna_flow_matches_the_eig_truth(tmp_path: Path, monkeypatch, capsys):
    demo = tmp_path / "demo"
    generate_demo(demo)
    truth = json.loads((demo / "truth.json").read_text(encoding="utf-8"))["variants"]
    chosen = [str(demo / f"{name}.s8p") for name in VARIANTS]
    with live_server(tmp_path / "server") as live:
        monkeypatch.setenv("BALLAST_CONFIG", str(tmp_path / "absent.toml"))
        code = main(["submit", *chosen, "--map", str(demo / "lna_map.json"), "--wait",
                     "--junit", str(tmp_path / "junit.xml"), "--report-dir",
                     str(tmp_path / "report"), "--url", live.url, "--token", live.token])
    assert code == 1
    cases = {c.get("name"): c for c in ET.parse(tmp_path / "junit.xml").getroot()
             .iter("testcase")}
    for name in VARIANTS:
        failure = cases[f"{name}.s8p"].find("failure")
        assert (failure is not None) == truth[name]["oscillates"], name
    pair = [s for s in truth["lna_no_gate_damping"]["natural_frequencies_hz"]
            if s["re"] > 0 and s["im"] > 0]
    assert len(pair) == 1
    message = cases["lna_no_gate_damping.s8p"].find("failure").get("message")
    named = re.search(r"first at ([0-9.]+) MHz", message)
    assert named and math.isclose(float(named.group(1)) * 1e6, pair[0]["im"], rel_tol=0.02)
    # eig of the MNA pencil (workers.lumped.natural_mode): the mode's voltage swings most at the
    # second drain d2, and its left and right vectors meet at the first gate g1, whose DC return
    # lost its damping resistor: that is where a part moves the mode most
    assert "node d2" in message and "most leverage at node g1" in message
    index = (tmp_path / "report" / "index.html").read_text(encoding="utf-8")
    assert index.count('href="checks/') == 2
