"""Check requests from scikit-rf networks, and scikit-rf's own network files read safely.

    import skrf
    from service.client import request_from_network
    request = request_from_network(skrf.Network("amp.s4p"), ports=[...], devices=[...])

A network is anything with ``.f`` (Hz, shape (F,)), ``.s`` (shape (F, N, N)) and ``.z0`` (Ω: one
number, one per port, or scikit-rf's (F, N)), so scikit-rf is never imported here except by
:func:`read_network_file`. The check request takes one real, positive reference impedance per
port (``z0_ohm``), so a complex z0 or one that changes with frequency is refused (renormalise the
network first, e.g. scikit-rf's ``Network.renormalize``). Above :data:`PACK_ABOVE_VALUES` S
values the arrays go as packed arrays (``{"dtype", "shape", "base64"}``), else as JSON lists;
both carry every float exactly.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

PACK_ABOVE_VALUES = 1024
NETWORK_ATTRIBUTES = ("f", "s", "z0")
SKRF_JSON_MEMBERS = frozenset({"_frequency", "_s", "_z0"})
RF_EXTRA_HINT = "install it with: pip install 'ballast[rf]'"


def request_from_network(network: Any, ports: Sequence[Mapping[str, Any]],
                         devices: Sequence[Mapping[str, Any]] | None = None,
                         gain_off: Any = None, options: Mapping[str, Any] | None = None
                         ) -> dict[str, Any]:
    """The JSON check request (a dict, as ``POST /v1/checks`` takes it) of ``network``.

    ``ports`` and ``devices`` are the request's own port and device objects, in the network's
    port order; ``options`` passes through. ``gain_off`` passes through when it is a dict (the
    request's network member), and is converted like ``network`` when it is a network (same
    frequencies). Raises ``TypeError`` for an object that is no network, ``ValueError`` when the
    shapes, the port count or z0 do not fit the request.
    """
    part = network_part(network, "network")
    if len(ports) != part.n_ports:
        raise ValueError(f"ports lists {len(ports)} port(s) but the network has {part.n_ports}")
    request: dict[str, Any] = dict(part.members)
    request["ports"] = [dict(port) for port in ports]
    if devices is not None:
        request["devices"] = [dict(device) for device in devices]
    if gain_off is not None:
        request["gain_off"] = _gain_off(gain_off, part)
    if options is not None:
        request["options"] = dict(options)
    return request


@dataclass(frozen=True)
class NetworkPart:
    """The network part of a check request (``members``: ``frequency_hz``, ``parameters``,
    ``data``, ``z0_ohm``) with the frequencies and the port count it was made from."""

    members: dict[str, Any]
    frequency_hz: np.ndarray
    n_ports: int


def network_part(network: Any, what: str = "network") -> NetworkPart:
    """``network`` as the network members of a check request (S data, per-port z0)."""
    f, s, z0 = _arrays(network, what)
    if s.size > PACK_ABOVE_VALUES:
        from service.schemas.request import pack_array  # the schema's own wire format

        frequency: Any = pack_array(f)
        data: Any = pack_array(s)
    else:
        frequency = f.tolist()
        data = {"re": s.real.tolist(), "im": s.imag.tolist()}
    members = {"frequency_hz": frequency, "parameters": "S", "data": data,
               "z0_ohm": z0.tolist()}
    return NetworkPart(members, f, s.shape[1])


def _arrays(network: Any, what: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    missing = [name for name in NETWORK_ATTRIBUTES if not hasattr(network, name)]
    if missing:
        raise TypeError(f"{what} must be a scikit-rf Network or have .f, .s and .z0 "
                        f"({type(network).__name__} has no {', '.join('.' + m for m in missing)})")
    f = np.asarray(network.f)
    if f.dtype.kind not in "iuf" or f.ndim != 1:
        raise ValueError(f"{what}.f must be a flat array of real frequencies in Hz")
    if f.size == 0:
        raise ValueError(f"{what} has no frequencies")
    f = f.astype(float)
    s = np.asarray(network.s)
    if s.dtype.kind not in "iufc" or s.ndim != 3 or s.shape[1] != s.shape[2] \
            or s.shape[0] != f.size:
        raise ValueError(f"{what}.s must have shape (F, N, N) with F = {f.size} frequencies "
                         f"(got {s.shape})")
    return f, s.astype(complex), _per_port_z0(network.z0, f.size, s.shape[1], what)


def _per_port_z0(raw: Any, n_freq: int, n_ports: int, what: str) -> np.ndarray:
    z0 = np.asarray(raw)
    if z0.dtype.kind not in "iufc":
        raise ValueError(f"{what}.z0 must be numbers")
    if z0.dtype.kind == "c":
        if np.any(z0.imag != 0):
            raise ValueError(f"{what}.z0 is complex; the check request takes real reference "
                             "impedances only (renormalise to real ones first)")
        z0 = z0.real
    z0 = z0.astype(float)
    if z0.ndim == 2 and z0.shape == (n_freq, n_ports):
        if np.any(z0 != z0[:1]):
            raise ValueError(f"{what}.z0 changes with frequency; the check request takes one "
                             "reference impedance per port (renormalise to fixed ones first)")
        z0 = z0[0]
    if z0.ndim == 0:
        z0 = np.full(n_ports, float(z0))
    if z0.shape != (n_ports,):
        raise ValueError(f"{what}.z0 must be one number, one per port ({n_ports}) or one per "
                         f"frequency and port (got shape {z0.shape})")
    if not (np.isfinite(z0).all() and (z0 > 0).all()):
        raise ValueError(f"{what}.z0 must be positive and finite")
    return z0


def _gain_off(gain_off: Any, network: NetworkPart) -> dict[str, Any]:
    if isinstance(gain_off, Mapping):
        return dict(gain_off)
    part = network_part(gain_off, "gain_off")
    if part.n_ports != network.n_ports or not np.array_equal(part.frequency_hz,
                                                              network.frequency_hz):
        raise ValueError("gain_off must have the network's ports and frequencies")
    return {key: value for key, value in part.members.items() if key != "frequency_hz"}


def read_network_file(path: Path) -> Any:
    """A ``skrf.Network`` from scikit-rf's JSON form of a network (what
    ``skrf.io.general.to_json_string`` writes, read by its ``from_json_string``). Never a pickle
    (scikit-rf's ``.ntwk``/``.p`` files): unpickling runs code. Raises ``ValueError`` naming the
    file when it is not that form, or when scikit-rf is not installed."""
    try:
        from skrf.io.general import from_json_string
    except ImportError as exc:
        raise ValueError(f"{path}: reading a scikit-rf network file needs scikit-rf; "
                         f"{RF_EXTRA_HINT}") from exc
    text = path.read_text(encoding="utf-8")
    try:
        value = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ValueError(f"{path}: is not JSON ({exc})") from exc
    if not isinstance(value, dict) or not SKRF_JSON_MEMBERS <= set(value):
        raise ValueError(f"{path}: is not a scikit-rf network file (scikit-rf's JSON form of a "
                         "network, written by skrf.io.general.to_json_string, has the members "
                         "_frequency, _s and _z0)")
    # scikit-rf 2.2 writes ``variables`` only for networks read from Touchstone, yet its reader
    # requires it (and ``name``, ``comments``): missing ones are taken as empty
    for member, empty in (("variables", {}), ("name", None), ("comments", "")):
        value.setdefault(member, empty)
    try:
        return from_json_string(json.dumps(value))
    except (KeyError, IndexError, TypeError, ValueError, AttributeError) as exc:
        raise ValueError(f"{path}: cannot be read as a scikit-rf network ({exc})") from exc
