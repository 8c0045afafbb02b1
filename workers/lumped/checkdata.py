"""Port data of a lumped circuit as a check request (JSON dict) and as Touchstone v1 text."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Literal

import numpy as np

from workers.lumped.mna import port_admittance
from workers.lumped.netlist import GROUND, VCCS, Circuit

PortSpec = tuple[str, str, Literal["external", "probe"]]  # (port name, circuit node, role)


def s_from_y(y: np.ndarray, z0_ohm: float | Sequence[float] = 50.0) -> np.ndarray:
    """S (F, N, N) from Y with real reference impedances.

    Common z0: S = (I − z0·Y)(I + z0·Y)⁻¹ (Pozar, Microwave Engineering, 4th ed., sec. 4.3,
    written with Y = Z⁻¹). Per-port real z0: S = R⁻¹ (I − Z0·Y)(I + Z0·Y)⁻¹ R with
    R = diag(√z0) (power-wave normalisation; Kurokawa, IEEE Trans. MTT 13(2), 1965).
    """
    y = np.asarray(y, dtype=complex)
    n = y.shape[-1]
    z0 = np.broadcast_to(np.asarray(z0_ohm, dtype=float), (n,))
    if np.any(z0 <= 0):
        raise ValueError("reference impedances must be positive")
    eye = np.eye(n)
    z0y = z0[None, :, None] * y
    # X·(I + Z0Y) = (I − Z0Y)  ⇔  (I + Z0Y)ᵀ·Xᵀ = (I − Z0Y)ᵀ
    a = np.swapaxes(eye + z0y, -1, -2)
    b = np.swapaxes(eye - z0y, -1, -2)
    s = np.swapaxes(np.linalg.solve(a, b), -1, -2)
    root = np.sqrt(z0)
    return s * root[None, None, :] / root[None, :, None]


def _number(value: complex) -> float | dict[str, float]:
    value = complex(value)
    if value.imag == 0:
        return float(value.real)
    return {"re": float(value.real), "im": float(value.imag)}


def _data(y: np.ndarray, parameter: str, z0_ohm: float) -> dict:
    values = s_from_y(y, z0_ohm) if parameter == "S" else y
    block: dict = {
        "parameters": parameter,
        "data": {"re": values.real.tolist(), "im": values.imag.tolist()},
    }
    if parameter == "S":
        block["z0_ohm"] = float(z0_ohm)
    return block


def check_request(
    circuit: Circuit,
    ports: Sequence[PortSpec],
    devices: Sequence[tuple[str, VCCS]],
    frequency_hz: np.ndarray,
    parameter: Literal["S", "Y"] = "S",
    z0: float = 50.0,
    terminations: Mapping[str, complex | float] | None = None,
    include_gain_off: bool = False,
) -> dict:
    """The JSON check request (as a dict) for ``circuit`` running with its devices on.

    ``ports`` are (name, node, role) in data order; ``devices`` are (name, VCCS) whose terminals
    must sit on port nodes or ground (→ null). ``terminations`` maps external port names to
    their termination in Ω (omitted ports use z0). ``include_gain_off`` adds the same data with
    every gm set to zero.
    """
    if parameter not in ("S", "Y"):
        raise ValueError(f"parameter must be 'S' or 'Y', not {parameter!r}")
    names = [name for name, _, _ in ports]
    if len(set(names)) != len(names):
        raise ValueError("port names must be distinct")
    nodes = [node for _, node, _ in ports]
    port_of_node = dict(zip(nodes, names, strict=True))
    frequency = np.asarray(frequency_hz, dtype=float)
    terminations = dict(terminations or {})
    unknown = set(terminations) - set(names)
    if unknown:
        raise ValueError(f"terminations for unknown ports: {sorted(unknown)}")

    def terminal(node: str, device: str) -> str | None:
        if node == GROUND:
            return None
        if node not in port_of_node:
            raise ValueError(f"device {device}: terminal node {node!r} has no port")
        return port_of_node[node]

    port_list = []
    for name, _, role in ports:
        entry: dict = {"name": name, "role": role}
        if name in terminations:
            entry["termination_ohm"] = _number(terminations[name])
        port_list.append(entry)
    device_list = []
    for name, vccs in devices:
        entry = {
            "name": name,
            "gm_s": _number(vccs.gm_s),
            "control": [terminal(vccs.control[0], name), terminal(vccs.control[1], name)],
            "output": [terminal(vccs.output[0], name), terminal(vccs.output[1], name)],
        }
        if vccs.delay_s > 0:
            entry["delay_s"] = float(vccs.delay_s)
        device_list.append(entry)

    request: dict = {"frequency_hz": frequency.tolist()}
    request.update(_data(port_admittance(circuit, nodes, frequency), parameter, z0))
    request["ports"] = port_list
    request["devices"] = device_list
    if include_gain_off:
        y_off = port_admittance(circuit.gain_off(), nodes, frequency)
        request["gain_off"] = _data(y_off, parameter, z0)
    return request


def to_touchstone(
    frequency_hz: np.ndarray,
    s: np.ndarray,
    z0: float = 50.0,
    comments: Sequence[str] = (),
    significant_digits: int = 13,
) -> str:
    """Touchstone v1 text, S parameters in RI format, frequency in Hz, one reference z0.

    Layout per the Touchstone File Format Specification v1.1 (IBIS Open Forum): 2-port lines
    hold N11 N21 N12 N22; 3 or more ports write one matrix row per line group, at most four
    complex pairs per line, each frequency's block starting with the frequency. Values carry
    ``significant_digits`` digits (13 by default: rounding S to fewer digits visibly disturbs
    rational fits of nearly lossless data).
    """
    s = np.asarray(s, dtype=complex)
    f = np.asarray(frequency_hz, dtype=float)
    if s.ndim != 3 or s.shape[1] != s.shape[2] or s.shape[0] != f.shape[0]:
        raise ValueError("s must be (F, N, N) with F matching frequency_hz")
    n = s.shape[1]
    if not all(text.isascii() and "\n" not in text for text in comments):
        raise ValueError("Touchstone comments must be single ASCII lines")
    lines = [f"! {text}" for text in comments]
    lines.append(f"# HZ S RI R {z0:g}")

    digits = int(significant_digits) - 1
    if digits < 0:
        raise ValueError("significant_digits must be at least 1")
    pairs = np.stack([s.real, s.imag], axis=-1)  # (F, N, N, 2)
    if n == 2:
        pairs = np.swapaxes(pairs, 1, 2)  # v1 2-port order: N11 N21 N12 N22
    rows = pairs.reshape(f.shape[0], n if n > 2 else 1, -1).tolist()
    heads = [f"{value:.12e}" for value in f.tolist()]
    pad = " " * len(heads[0]) if heads else ""
    for head, block in zip(heads, rows, strict=True):
        for row_index, row in enumerate(block):
            for start in range(0, len(row), 8):  # at most four complex pairs per line
                numbers = " ".join(f"{value: .{digits}e}" for value in row[start : start + 8])
                first = row_index == 0 and start == 0
                lines.append(f"{head if first else pad} {numbers}")
    return "\n".join(lines) + "\n"
