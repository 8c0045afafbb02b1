"""The check request boundary: every bad input gets one error naming its field.

The expectations come from the request contract in the engine issue (field names, limits
N <= 64 ports, F <= 100,000 points) — the contract itself is the outside reference here.
"""

from __future__ import annotations

import copy
from typing import Any

import numpy as np
import pytest
from marshmallow import ValidationError

from service.runner import load_request
from service.schemas.errors import flatten_errors
from workers.engine.request import CheckRequest


def _payload(n_freq: int = 5, n_ports: int = 3) -> dict[str, Any]:
    f = np.linspace(1e9, 5e9, n_freq)
    y = np.broadcast_to(np.eye(n_ports) * (0.02 + 0.01j), (n_freq, n_ports, n_ports))
    return {
        "frequency_hz": f.tolist(),
        "parameters": "Y",
        "data": {"re": y.real.tolist(), "im": y.imag.tolist()},
        "ports": [{"name": "in", "role": "external"}, {"name": "gate", "role": "probe"},
                  {"name": "drain", "role": "probe"}][:n_ports],
        "devices": [{"name": "Q1", "gm_s": 0.05, "control": ["gate", None],
                     "output": ["drain", None]}],
    }


def _errors(payload: dict[str, Any]) -> dict[str, str]:
    with pytest.raises(ValidationError) as caught:
        load_request(payload)
    return dict(flatten_errors(caught.value.messages))


def _set(path: str, value: Any) -> dict[str, Any]:
    payload = copy.deepcopy(_payload())
    *parents, last = path.split(".")
    node: Any = payload
    for key in parents:
        node = node[int(key)] if isinstance(node, list) else node[key]
    if value is _DELETE:
        del node[int(last) if isinstance(node, list) else last]
    elif isinstance(node, list):
        node[int(last)] = value
    else:
        node[last] = value
    return payload


_DELETE = object()

BAD_INPUTS = [
    # (description, path to change, new value, field named in the error, words in the message)
    ("frequencies not increasing", "frequency_hz", [1e9, 3e9, 2e9, 4e9, 5e9], "frequency_hz",
     "increasing"),
    ("negative frequency", "frequency_hz", [-1.0, 1e9, 2e9, 3e9, 4e9], "frequency_hz", ">= 0"),
    ("too few points", "frequency_hz", [1e9, 2e9], "frequency_hz", "at least 3"),
    ("NaN in data", "data.re.0.0.0", float("nan"), "data.re", "finite"),
    ("infinite frequency", "frequency_hz.2", float("inf"), "frequency_hz", "point 2"),
    ("text in frequencies", "frequency_hz.1", "2e9", "frequency_hz", "array of numbers"),
    ("data shape vs ports", "ports.2", _DELETE, "data", "shape"),
    ("ragged im rows", "data.im.0", [[0.0]], "data.im", "equal-length rows"),
    ("re and im shapes differ", "data.im", [[[0.0]]], "data", "shape"),
    ("duplicate port name", "ports.2.name", "gate", "ports.2.name", "duplicate"),
    ("unknown role", "ports.1.role", "monitor", "ports.1.role", "Must be one of"),
    ("terminal not a port", "devices.0.control.0", "base", "devices.0.control", "not in ports"),
    ("device shorted control", "devices.0.control", ["gate", "gate"], "devices.0.control",
     "differ"),
    ("gm wrong length", "devices.0.gm_s", {"re": [0.05, 0.05], "im": [0.0, 0.0]},
     "devices.0.gm_s", "one per frequency"),
    ("unknown field", "colour", "blue", "colour", "Unknown field"),
    ("unknown device field", "devices.0.beta", 100, "devices.0.beta", "Unknown field"),
    ("probe with termination", "ports.1.termination_ohm", 50, "ports.1.termination_ohm",
     "probe ports stay open"),
    ("z0 with Y data", "z0_ohm", 50, "z0_ohm", "S data only"),
    ("missing data", "data", _DELETE, "data", "missing"),
    ("bad parameter letter", "parameters", "H", "parameters", "Must be one of"),
    ("boolean gm", "devices.0.gm_s", True, "devices.0.gm_s", "number"),
]


@pytest.mark.parametrize(("path", "value", "field", "words"),
                         [case[1:] for case in BAD_INPUTS], ids=[c[0] for c in BAD_INPUTS])
def test_bad_input_names_field(path: str, value: Any, field: str, words: str) -> None:
    errors = _errors(_set(path, value))
    assert field in errors, errors
    assert words in errors[field]


def test_no_devices_and_no_gain_off_is_refused() -> None:
    errors = _errors(_set("devices", []))
    assert "gain_off" in errors["devices"]


def test_port_limit() -> None:
    payload = _payload()
    payload["ports"] = [{"name": f"p{k}", "role": "probe"} for k in range(65)]
    assert "ports" in _errors(payload)


def test_point_limit() -> None:
    payload = _payload()
    payload["frequency_hz"] = np.arange(100_001, dtype=float).tolist()
    payload["data"] = {"re": np.zeros((100_001, 3, 3)).tolist(),
                       "im": np.zeros((100_001, 3, 3)).tolist()}
    errors = _errors(payload)
    assert "100000" in errors["frequency_hz"]


def test_s_data_with_per_port_z0_and_complex_termination() -> None:
    payload = _payload()
    payload["parameters"] = "S"
    s = np.broadcast_to(np.eye(3) * 0.1, (5, 3, 3))
    payload["data"] = {"re": s.tolist(), "im": np.zeros_like(s).tolist()}
    payload["z0_ohm"] = [50, 25, 75]
    payload["ports"][0]["termination_ohm"] = {"re": 50, "im": -10}
    request = load_request(payload)
    assert isinstance(request, CheckRequest)
    assert request.network.z0_ohm.tolist() == [50.0, 25.0, 75.0]
    assert request.ports[0].termination_ohm == complex(50, -10)
    assert request.devices[0].control == (1, None)
    assert request.devices[0].gm_s.shape == (5,)


def test_wrong_z0_count() -> None:
    payload = _payload()
    payload["parameters"] = "S"
    payload["z0_ohm"] = [50, 50]
    assert "z0_ohm" in _errors(payload)


def test_per_frequency_gm_and_delay_kept() -> None:
    payload = _payload()
    payload["devices"][0]["gm_s"] = {"re": [0.01, 0.02, 0.03, 0.04, 0.05], "im": [0.0] * 5}
    payload["devices"][0]["delay_s"] = 3e-12
    request = load_request(payload)
    np.testing.assert_allclose(request.devices[0].gm_s.real, [0.01, 0.02, 0.03, 0.04, 0.05])
    assert request.devices[0].delay_s == 3e-12
