"""The shipped example ``examples/request.json`` (README, "Check one circuit locally") is valid,
is what ``examples/make_request.py`` writes, and runs through the API to the verdict that
nodal analysis gives in closed form.

Reference: the stage's nodal equations with its terminations, written out by hand (common
practice: nodal analysis, e.g. any circuits textbook's chapter on it). With Ya = Gs + s(Cgs +
Cgd) + 1/(sLg) at the gate and Yb = GL + s(Cds + Cgd) + 1/(sLd) at the drain, the natural
frequencies are the zeros of det = Ya·Yb + sCgd·(gm − sCgd); times s²·Lg·Ld this is the quartic
(sLg(Gs + sCi) + 1)(sLd(GL + sCo) + 1) + s³LgLdCgd·gm − s⁴LgLdCgd², Ci = Cgs + Cgd,
Co = Cds + Cgd, whose roots numpy finds. Gs = 1/1000 S: one right-half-plane pair; with a 50 Ω
source (Gs = 1/50 S) none.
"""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import numpy as np
import pytest

from service.schemas.request import CheckRequestSchema
from tests.api_fixtures import run_worker

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "request.json"
LG, LD, CGS, CGD, CDS, GM = 10e-9, 5e-9, 0.5e-12, 0.1e-12, 0.2e-12, 0.1


def natural_frequencies(source_ohm: float, load_ohm: float) -> np.ndarray:
    """Roots (rad/s) of the quartic in the module docstring."""
    p = np.polynomial.polynomial
    gate = [1.0, LG / source_ohm, LG * (CGS + CGD)]
    drain = [1.0, LD / load_ohm, LD * (CDS + CGD)]
    feedback = [0.0, 0.0, 0.0, LG * LD * CGD * GM, -LG * LD * CGD**2]
    return p.polyroots(p.polyadd(p.polymul(gate, drain), feedback))


def example() -> dict:
    return json.loads(EXAMPLE.read_text(encoding="utf-8"))


def test_the_file_is_what_its_generator_writes():
    spec = importlib.util.spec_from_file_location("make_request", ROOT / "examples" /
                                                  "make_request.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    assert example() == json.loads(json.dumps(module.request()))


def test_the_example_validates_with_the_request_schema():
    request = CheckRequestSchema().load(example())
    assert [p.name for p in request.ports] == ["in", "out"]
    assert len(request.frequency_hz) == 321


def submit_and_run(client, auth, api_stores, payload: dict) -> dict:
    response = client.post("/v1/checks", json=payload, headers=auth)
    assert response.status_code == 202, response.get_json()
    check_id = response.get_json()["id"]
    run_worker(api_stores.checks, [check_id])
    body = client.get(f"/v1/checks/{check_id}", headers=auth).get_json()
    assert body["status"] == "done", body
    return body["verdict"]


def test_the_example_oscillates_where_nodal_analysis_says(client, auth, api_stores):
    roots = natural_frequencies(1000.0, 50.0)
    right = roots[roots.real > 0]
    assert right.size == 2  # the reference itself: one complex pair
    want = right[right.imag > 0][0]
    verdict = submit_and_run(client, auth, api_stores, example())
    assert verdict["verdict"] == "unstable"
    assert verdict["unstable_count"] == 2 and verdict["count_complete"] is True
    (mode,) = verdict["modes"]
    assert mode["frequency_hz"] == pytest.approx(want.imag / (2 * np.pi), rel=1e-3)
    assert mode["growth_rate_per_s"] == pytest.approx(want.real, rel=1e-2)
    assert mode["devices"] == ["Q1"]


def test_with_a_50_ohm_source_the_example_is_stable(client, auth, api_stores):
    assert (natural_frequencies(50.0, 50.0).real < 0).all()
    payload = example()
    payload["ports"][0]["termination_ohm"] = 50.0
    verdict = submit_and_run(client, auth, api_stores, payload)
    assert verdict["verdict"] == "stable"
    assert verdict["unstable_count"] == 0 and verdict["count_complete"] is True
