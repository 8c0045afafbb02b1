"""A network whose Y does not exist at some frequency is a diagnostic, never a crash.

S = −I means every port is a short circuit (Γ = −1 for a short: Pozar, *Microwave
Engineering*, 4th ed., sec. 2.3 — common practice), so I + S is singular and Y is unbounded there.
"""

from __future__ import annotations

import numpy as np

from service.runner import run_check_json
from tests.test_cli_check import C_F, G_S, L_H


def _tank_s_request(short_at: int | None) -> dict:
    f = np.geomspace(1e6, 1e12, 3001)
    w = 2 * np.pi * f
    gm = 0.5e-3  # net conductance stays positive: a stable tank
    y = (G_S - gm) + 1j * w * C_F + 1 / (1j * w * L_H)
    s = (1 - 50 * y) / (1 + 50 * y)
    if short_at is not None:
        s[short_at] = -1.0
    return {
        "frequency_hz": f.tolist(), "parameters": "S",
        "data": {"re": s.real[:, None, None].tolist(), "im": s.imag[:, None, None].tolist()},
        "ports": [{"name": "tank", "role": "probe"}],
        "devices": [{"name": "Q1", "gm_s": gm, "control": ["tank", None],
                     "output": [None, "tank"]}],
        "options": {"phase_step_limit_deg": 90},
    }


def test_singular_point_is_reported_and_left_out() -> None:
    verdict = run_check_json(_tank_s_request(short_at=1500))
    codes = {d["code"]: d for d in verdict["diagnostics"]}
    assert "singular_points" in codes
    assert codes["singular_points"]["severity"] == "warning"
    # the rest of the band still decides, as it does without the bad point
    assert verdict["verdict"] == run_check_json(_tank_s_request(short_at=None))["verdict"]
    assert verdict["verdict"] == "stable"
