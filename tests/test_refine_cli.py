"""`ballast check` returns the identified modes, the agreeing methods and the hint (issue 3).

Oracle: scipy.linalg.eig on the MNA pencil of the generated circuit (workers.lumped) and the
parallel-RLC closed form for the hint (Re Y = 1/R + gm at every frequency, common practice).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from tests.support.grids import COARSE_HZ
from tests.support.refine_cases import tank
from workers.engine import run_check


def _request_json(case, f: np.ndarray) -> dict:
    request = case.request(f)
    y = request.network.values
    device = request.devices[0]
    return {
        "frequency_hz": f.tolist(), "parameters": "Y",
        "data": {"re": y.real.tolist(), "im": y.imag.tolist()},
        "ports": [{"name": p.name, "role": p.role} for p in request.ports],
        "devices": [{"name": device.name, "gm_s": float(device.gm_s[0].real),
                     "delay_s": device.delay_s,
                     "control": [request.ports[0].name, None],
                     "output": [request.ports[0].name, None]}],
    }


def _ballast(*args: str) -> subprocess.CompletedProcess[str]:
    exe = Path(sys.executable).with_name("ballast")
    command = [str(exe)] if exe.exists() else [sys.executable, "-m", "service"]
    return subprocess.run([*command, *args], capture_output=True, text=True, timeout=120,
                          check=False)


def test_ballast_check_reports_modes_methods_and_hint(tmp_path):
    case = tank(2.2e9, 0.004)
    path = tmp_path / "tank.json"
    path.write_text(json.dumps(_request_json(case, COARSE_HZ)))
    done = _ballast("check", str(path))
    assert done.returncode == 1, done.stderr
    body = json.loads(done.stdout)
    truth = case.unstable()[0]
    assert body["verdict"] == "unstable" and body["unstable_count"] == 2
    mode = body["modes"][0]
    assert mode["frequency_hz"] == pytest.approx(truth.imag / (2 * np.pi), rel=1e-5)
    assert mode["growth_rate_per_s"] == pytest.approx(truth.real, rel=1e-3)
    assert mode["estimated_by"] == "rational_model"
    assert mode["nodes"] == ["tank"] and mode["devices"] == ["Q1"]
    # the hint brings the tank to ζ = 0.05: G_shunt = 2ζCω₀ − (1/R + gm) (ζ = G/(2Cω₀) of the
    # parallel RLC, common practice), found on a grid to 2.1 %
    r = case.circuit.element("R").ohms
    gm = case.circuit.element("Q1").gm_s
    c_f = case.circuit.element("C").farads
    w0 = 1 / np.sqrt(case.circuit.element("L").henries * c_f)
    needed = 2 * 0.05 * c_f * w0 - (1 / r + gm)
    assert needed * (1 - 1e-6) <= mode["hint"]["shunt_conductance_s"] <= needed * 1.022
    assert body["hints"][0]["between"] == ["tank", None]
    methods = {m["method"]: m for m in body["methods"]}
    assert methods["encirclement"]["unstable_count"] == 2
    assert methods["rational_model"]["unstable_count"] == 2
    assert methods["rational_model"]["agrees"] is True
    refinement = body["refinement"]
    assert refinement["points_added"] > 0 and refinement["intervals"]
    assert refinement["model"]["validated"] is True
    assert refinement["model"]["leave_out_error"] < 1e-6


def test_delay_in_gm_is_reported_as_not_rational():
    # Issue 3: with gm·e^(−jωτ) NDF is not rational; its model zeros must not be taken as natural
    # frequencies. (A delayed VCCS has no finite set of natural frequencies: workers.lumped
    # refuses to compute them, so this test checks the engine's honesty, not a number.)
    case = tank(2.2e9, 0.004, delay_s=5e-12)
    verdict = run_check(case.request(COARSE_HZ))
    assert "not_rational" in {d.code for d in verdict.diagnostics}
    model = next(m for m in verdict.methods if m.method == "rational_model")
    assert model.unstable_count is None
    assert all(m.estimated_by != "rational_model" for m in verdict.modes)
