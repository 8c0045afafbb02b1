"""Check requests with packed arrays (``{"dtype", "shape", "base64"}``) and as JSON lists.

The packed bytes are made with the standard library's ``base64`` (RFC 4648 section 4) and
numpy's ``ndarray.tobytes`` for the dtypes ``<f8`` and ``<c16`` (IEEE 754 binary64,
little-endian, row-major, real and imaginary pairs), not with the project's ``pack_array``.
"""

from __future__ import annotations

import base64
import copy
from typing import Any

import numpy as np

_RNG = np.random.default_rng(20261202)
F, N = 7, 3  # frequencies and ports of ``lists_payload``


def lists_payload() -> dict[str, Any]:
    """A 3-port Y request (F = 7 seeded points, one device with per-frequency gm) as lists."""
    f = np.sort(_RNG.uniform(1e8, 6e9, F))
    y = _RNG.normal(size=(F, N, N)) + 1j * _RNG.normal(size=(F, N, N)) + 3 * np.eye(N)
    gm = 0.04 * np.exp(-1j * _RNG.uniform(0, 1, F))
    return {
        "frequency_hz": f.tolist(),
        "parameters": "Y",
        "data": {"re": y.real.tolist(), "im": y.imag.tolist()},
        "ports": [{"name": "in", "role": "external"}, {"name": "g", "role": "probe"},
                  {"name": "d", "role": "probe"}],
        "devices": [{"name": "Q1", "gm_s": {"re": gm.real.tolist(), "im": gm.imag.tolist()},
                     "control": ["g", None], "output": ["d", None]}],
    }


def packed_array(values: np.ndarray, dtype: str) -> dict[str, Any]:
    """``values`` as a packed array, written with numpy's ``tobytes`` and the standard
    library's base64 (not the project's ``pack_array``)."""
    raw = np.asarray(values, dtype={"float64": "<f8", "complex128": "<c16"}[dtype]).tobytes()
    return {"dtype": dtype, "shape": list(np.shape(values)),
            "base64": base64.b64encode(raw).decode()}


def packed_payload(payload: dict[str, Any] | None = None) -> dict[str, Any]:
    """``payload`` (default: a new one) with every array packed."""
    payload = lists_payload() if payload is None else payload
    data = np.asarray(payload["data"]["re"]) + 1j * np.asarray(payload["data"]["im"])
    gm = payload["devices"][0]["gm_s"]
    out = copy.deepcopy(payload)
    out["frequency_hz"] = packed_array(np.asarray(payload["frequency_hz"]), "float64")
    out["data"] = packed_array(data, "complex128")
    out["devices"][0]["gm_s"] = packed_array(np.asarray(gm["re"]) + 1j * np.asarray(gm["im"]),
                                             "complex128")
    return out
