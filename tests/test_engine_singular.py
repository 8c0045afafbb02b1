"""A network whose Y does not exist at some frequency is a diagnostic, never a crash.

S = −I means every port is a short circuit (Γ = −1 for a short: Pozar, *Microwave
Engineering*, 4th ed., sec. 2.3 — common practice), so I + S is singular and Y is unbounded there.
"""

from __future__ import annotations

import numpy as np

from service.runner import run_check_json
from tests.support.json_requests import gm_tank_request


def _tank_s_request(short_at: int | None) -> dict:
    """The stable gm tank (net conductance stays positive) as S data."""
    request = gm_tank_request(gm=0.5e-3)
    y = np.asarray(request["data"]["re"]) + 1j * np.asarray(request["data"]["im"])
    s = (1 - 50 * y) / (1 + 50 * y)
    if short_at is not None:
        s[short_at] = -1.0
    request["parameters"] = "S"
    request["data"] = {"re": s.real.tolist(), "im": s.imag.tolist()}
    return request


def test_singular_point_is_reported_and_left_out() -> None:
    verdict = run_check_json(_tank_s_request(short_at=1500))
    codes = {d["code"]: d for d in verdict["diagnostics"]}
    assert "singular_points" in codes
    assert codes["singular_points"]["severity"] == "warning"
    # the rest of the band still decides, as it does without the bad point
    assert verdict["verdict"] == run_check_json(_tank_s_request(short_at=None))["verdict"]
    assert verdict["verdict"] == "stable"
