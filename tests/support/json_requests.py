"""JSON check requests (dicts, as the API and the command line take them) of closed-form tanks.

Two parallel tanks, each with a natural frequency in closed form (the parallel RLC natural
response, s² + (G/C)s + 1/(LC) = 0 → s = −G/2C ± j√(1/LC − (G/2C)²); common practice, e.g.
Nilsson & Riedel, Electric Circuits, the chapter on second-order circuits — edition and chapter
not checked, from memory):

* ``gm_tank_request``: G, L, C with a transconductance gm feeding back on the node, Y data
  written from the closed form Y(jω) = G − gm + jωC + 1/(jωL): unstable exactly when gm > G.
* ``rlc_tank_request``: the ``workers.lumped.families.parallel_rlc_negative_g`` family with
  R = 200 Ω, 1 nH, 2 pF, S data from the MNA simulator: G = 1/R + g, stable for g = −3 mS and
  oscillating for g = −8 mS at ``rlc_tank_frequency_hz(-8e-3)`` ≈ 3.557 GHz.
"""

from __future__ import annotations

import math

import numpy as np

from workers.lumped.families import parallel_rlc_negative_g

GM_TANK_L_H, GM_TANK_C_F, GM_TANK_G_S = 1e-9, 1e-12, 1e-3
GM_TANK_F0_HZ = 1 / (2 * np.pi * np.sqrt(GM_TANK_L_H * GM_TANK_C_F))


def gm_tank_request(gm: float, f_lo: float = 1e6, f_hi: float = 1e12,
                    points: int = 3001) -> dict:
    """One probe port "tank", Y data from the closed form, device Q1 of transconductance gm."""
    f = np.geomspace(f_lo, f_hi, points)
    w = 2 * np.pi * f
    y = (GM_TANK_G_S - gm) + 1j * w * GM_TANK_C_F + 1 / (1j * w * GM_TANK_L_H)
    return {
        "frequency_hz": f.tolist(), "parameters": "Y",
        "data": {"re": y.real[:, None, None].tolist(), "im": y.imag[:, None, None].tolist()},
        "ports": [{"name": "tank", "role": "probe"}],
        "devices": [{"name": "Q1", "gm_s": gm, "control": ["tank", None],
                     "output": [None, "tank"]}],
        "options": {"phase_step_limit_deg": 90},
    }


RLC_R_OHM, RLC_L_H, RLC_C_F = 200.0, 1e-9, 2e-12
RLC_BAND_HZ = np.geomspace(1e6, 1e12, 801)
RLC_SHORT_BAND_HZ = np.geomspace(1e6, 1e12, 101)  # the engine refines Touchstone data slowly


def rlc_tank_frequency_hz(g_neg_s: float) -> float:
    """Closed form: imaginary part of the natural frequency of the parallel G, L, C tank / 2π."""
    g = 1.0 / RLC_R_OHM + g_neg_s
    return math.sqrt(1.0 / (RLC_L_H * RLC_C_F) - (g / (2 * RLC_C_F)) ** 2) / (2 * math.pi)


def rlc_tank_request(g_neg_s: float, band_hz: np.ndarray = RLC_BAND_HZ) -> dict:
    """The R = 200 Ω tank with negative conductance ``g_neg_s`` as a JSON check request."""
    return parallel_rlc_negative_g(RLC_R_OHM, RLC_L_H, RLC_C_F, g_neg_s).check_request(band_hz)
