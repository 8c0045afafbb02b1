"""workers.engine.verdict: the JSON form of ``ballast.verdict/1``.

Oracle: the contract in DEVELOPERS.md ("Verdict format") and the issue that added the fields:
``count_complete``, ``modes`` in every verdict, ``assumptions``, ``next_sweep`` {``band_hz``,
``frequencies_hz``, ``reason``} absent when the verdict is final, ``devices[].fmax_hz``, mode
``node_leverage``; JSON has no NaN (non-finite numbers become null) and no tuples.
"""

from __future__ import annotations

import json

import numpy as np

from tests.support.closed_forms import ndf_request, rational
from workers.engine import run_check

TWO_PI = 2 * np.pi
POLES = [TWO_PI * (-0.3e9 + 0.9e9j)]
GROWING = TWO_PI * (+0.05e9 + 2e9j)


def _dict(f):
    request = ndf_request(rational(TWO_PI * 1j * f, [GROWING], POLES), f, fmax_hz=5e11)
    return run_check(request).to_dict()


def test_final_and_open_verdicts_carry_the_contract_fields():
    final = _dict(np.geomspace(1e6, 1e12, 1201))
    open_band = _dict(np.linspace(300e6, 15e9, 401))
    for body in (final, open_band):
        assert body["format"] == "ballast.verdict/1"
        assert isinstance(body["count_complete"], bool)
        assert isinstance(body["modes"], list) and isinstance(body["assumptions"], list)
        assert body["devices"][0]["fmax_hz"] == 5e11
        mode = body["modes"][0]
        assert {"frequency_hz", "growth_rate_per_s", "nodes", "devices", "node_participation",
                "node_leverage", "pinned"} <= set(mode)
        json.dumps(body, allow_nan=False)  # strict JSON
    assert final["count_complete"] and "next_sweep" not in final
    assert not open_band["count_complete"]
    sweep = open_band["next_sweep"]
    assert set(sweep) == {"band_hz", "frequencies_hz", "reason"}
    assert isinstance(sweep["band_hz"], list) and len(sweep["band_hz"]) == 2
    assert all(isinstance(x, float) for x in sweep["frequencies_hz"])
    assert {"code", "message"} == set(final["assumptions"][0])
