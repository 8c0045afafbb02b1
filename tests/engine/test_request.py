"""workers.engine.request: the typed check request.

Oracles: the published request contract in DEVELOPERS.md ("Check request (JSON)": the options'
defaults, the port roles, the limits N <= 64 ports and F <= 100,000 points), read from the file
itself so that the two cannot drift apart, and Python's dataclasses semantics (a frozen
dataclass refuses assignment with ``dataclasses.FrozenInstanceError``).
"""

from __future__ import annotations

import dataclasses
import json
import re
import typing
from pathlib import Path

import numpy as np
import pytest

from workers.engine import request as request_module
from workers.engine.request import (
    MAX_POINTS,
    MAX_PORTS,
    CheckOptions,
    CheckRequest,
    Device,
    Network,
    Port,
    PortRole,
)

GUIDE = (Path(__file__).resolve().parents[2] / "DEVELOPERS.md").read_text(encoding="utf-8")


def documented_options() -> dict:
    """The ``"options": {...}`` defaults of the request sketch in DEVELOPERS.md."""
    match = re.search(r'"options": (\{[^}]*\})', GUIDE)
    assert match, "DEVELOPERS.md no longer shows the options"
    return json.loads(re.sub(r"\s+", " ", match.group(1)))


def test_option_defaults_are_the_documented_ones():
    documented = documented_options()
    defaults = CheckOptions()
    assert {f.name for f in dataclasses.fields(CheckOptions)} == set(documented)
    for name, value in documented.items():
        assert getattr(defaults, name) == value, name


def test_limits_are_the_documented_ones():
    match = re.search(r"Limits: N <= (\d+) ports, F <= ([\d,]+) points", GUIDE)
    assert match
    assert MAX_PORTS == int(match.group(1))
    assert MAX_POINTS == int(match.group(2).replace(",", ""))


def test_port_roles_are_the_documented_ones():
    roles = set(re.findall(r'"role": "(\w+)"', GUIDE))
    assert roles == set(typing.get_args(PortRole)) == {"external", "probe"}


def small_request() -> CheckRequest:
    f = np.array([1e9, 2e9, 3e9, 4e9])
    y = np.broadcast_to(np.eye(2) * 0.02, (4, 2, 2)).astype(complex)
    device = Device("Q1", np.full(4, 0.05 + 0j), (0, None), (1, None))
    return CheckRequest(f, Network("Y", y, np.full(2, 50.0)),
                        (Port("in", "external"), Port("g", "probe")), (device,))


@pytest.mark.parametrize("name", ["Port", "Device", "Network", "CheckOptions", "CheckRequest"])
def test_every_record_is_a_frozen_dataclass(name):
    cls = getattr(request_module, name)
    assert dataclasses.is_dataclass(cls) and cls.__dataclass_params__.frozen
    request = small_request()
    instance = {"Port": request.ports[0], "Device": request.devices[0],
                "Network": request.network, "CheckOptions": request.options,
                "CheckRequest": request}[name]
    first = dataclasses.fields(cls)[0].name
    with pytest.raises(dataclasses.FrozenInstanceError):
        setattr(instance, first, getattr(instance, first))


def test_defaults_and_sizes():
    request = small_request()
    assert request.n_ports == 2 and request.n_points == 4
    assert request.gain_off is None and request.options == CheckOptions()
    assert request.ports[0].termination_ohm is None  # the port's reference impedance applies
    assert request.devices[0].delay_s == 0.0
    # each request gets its own options object (default_factory), equal to the defaults
    assert small_request().options is not request.options
