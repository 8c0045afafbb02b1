"""Write ``examples/request.json``: an invented one-FET stage as a JSON check request.

    python examples/make_request.py            # rewrites examples/request.json

The circuit: the FET's gate (port "in") has a bias choke Lg = 10 nH to ground and sees a 1 kΩ
source; its drain (port "out") has a choke Ld = 5 nH and a 50 Ω load. Cgs = 0.5 pF,
Cgd = 0.1 pF, Cds = 0.2 pF, gm = 100 mS. The data are the two-port's Y parameters with the
device on and the ports open (the terminations are the ports' ``termination_ohm``), written from
the nodal admittances in closed form on a log grid from 10 kHz to 1 THz. Nothing is measured.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

LG_H, LD_H = 10e-9, 5e-9
CGS_F, CGD_F, CDS_F = 0.5e-12, 0.1e-12, 0.2e-12
GM_S = 0.1
SOURCE_OHM, LOAD_OHM = 1000.0, 50.0
FREQUENCY_HZ = np.geomspace(1e4, 1e12, 321)  # 40 points per decade


def y_parameters(frequency_hz: np.ndarray) -> np.ndarray:
    """[F][2][2] Y of the stage with the device on, ports open (no terminations)."""
    s = 2j * np.pi * frequency_hz
    y = np.empty((frequency_hz.size, 2, 2), complex)
    y[:, 0, 0] = s * (CGS_F + CGD_F) + 1 / (s * LG_H)
    y[:, 0, 1] = -s * CGD_F
    y[:, 1, 0] = GM_S - s * CGD_F  # the drain current gm·v(in) leaves the node "out"
    y[:, 1, 1] = s * (CDS_F + CGD_F) + 1 / (s * LD_H)
    return y


def request() -> dict:
    y = y_parameters(FREQUENCY_HZ)
    return {
        "frequency_hz": [float(f) for f in FREQUENCY_HZ],
        "parameters": "Y",
        "data": {"re": np.round(y.real, 15).tolist(), "im": np.round(y.imag, 15).tolist()},
        "ports": [{"name": "in", "role": "external", "termination_ohm": SOURCE_OHM},
                  {"name": "out", "role": "external", "termination_ohm": LOAD_OHM}],
        "devices": [{"name": "Q1", "gm_s": GM_S, "control": ["in", None],
                     "output": ["out", None]}],
    }


if __name__ == "__main__":
    path = Path(__file__).with_name("request.json")
    path.write_text(json.dumps(request(), separators=(",", ":")) + "\n")
    print(path)
