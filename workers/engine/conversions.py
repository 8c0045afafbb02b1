"""Network conversions: port Y from S, Y or Z data; external terminations; device stamps.

S to Y for a real reference z0 per port (Pozar, *Microwave Engineering*, 4th ed., sec. 4.3):
    Y = Z0^(-1/2) (I − S)(I + S)^(-1) Z0^(-1/2),  Z0 = diag(z0).
Solved exactly with LU per frequency; a frequency where (I + S) is singular is reported, never
nudged.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workers.engine.request import CheckRequest, Device, Network


@dataclass(frozen=True)
class Solved:
    """A batched result with the frequency points where the matrix was singular masked out."""

    values: np.ndarray
    singular: np.ndarray  # (F,) bool


def batched_solve(a: np.ndarray, b: np.ndarray) -> Solved:
    """Solve a[f] x[f] = b[f] for every f; singular frequencies give NaN and are flagged."""
    b = np.broadcast_to(b, a.shape[:-2] + b.shape[-2:])
    singular = np.zeros(a.shape[0], dtype=bool)
    try:
        return Solved(np.linalg.solve(a, b), singular)
    except np.linalg.LinAlgError:
        out = np.full(b.shape, np.nan + 0j, dtype=complex)
        for k in range(a.shape[0]):
            try:
                out[k] = np.linalg.solve(a[k], b[k])
            except np.linalg.LinAlgError:
                singular[k] = True
        return Solved(out, singular)


def batched_inv(a: np.ndarray) -> Solved:
    """Inverse of every matrix in a (F, N, N) stack; singular ones give NaN and are flagged."""
    eye = np.broadcast_to(np.eye(a.shape[-1], dtype=complex), a.shape)
    return batched_solve(a, eye)


def y_from_s(s: np.ndarray, z0_ohm: np.ndarray) -> Solved:
    """Port admittance from S referenced to a real z0 per port (formula in the module docstring)."""
    n = s.shape[-1]
    eye = np.eye(n)
    # (I − S)(I + S)^-1 = ((I + S)^-T (I − S)^T)^T
    lhs = np.swapaxes(eye + s, -1, -2)
    rhs = np.swapaxes(eye - s, -1, -2)
    solved = batched_solve(lhs, rhs)
    ratio = np.swapaxes(solved.values, -1, -2)
    scale = 1.0 / np.sqrt(np.outer(z0_ohm, z0_ohm))
    return Solved(ratio * scale, solved.singular)


def port_admittance(network: Network) -> Solved:
    """Y (F, N, N) in siemens from the network's own parameter type."""
    if network.parameter == "Y":
        return Solved(np.asarray(network.values, dtype=complex),
                      np.zeros(network.values.shape[0], dtype=bool))
    if network.parameter == "Z":
        return batched_inv(np.asarray(network.values, dtype=complex))
    return y_from_s(np.asarray(network.values, dtype=complex), network.z0_ohm)


def termination_admittances(request: CheckRequest) -> np.ndarray:
    """(N,) admittance added at each port: 1/Z_term at external ports, 0 at probe ports (open)."""
    y = np.zeros(request.n_ports, dtype=complex)
    for k, port in enumerate(request.ports):
        if port.role == "external":
            z = port.termination_ohm if port.termination_ohm is not None \
                else request.network.z0_ohm[k]
            y[k] = 1.0 / complex(z)
    return y


def device_vectors(devices: tuple[Device, ...], n_ports: int) -> tuple[np.ndarray, np.ndarray]:
    """U (N, D) and V (N, D) with Y_stamp = Σ_d gm_d · U[:, d] V[:, d]ᵀ.

    u = e[o+] − e[o−] (where the current goes), v = e[c+] − e[c−] (what controls it); ground
    terminals contribute nothing.
    """
    u = np.zeros((n_ports, len(devices)))
    v = np.zeros((n_ports, len(devices)))
    for d, device in enumerate(devices):
        for sign, index in zip((1.0, -1.0), device.output, strict=True):
            if index is not None:
                u[index, d] += sign
        for sign, index in zip((1.0, -1.0), device.control, strict=True):
            if index is not None:
                v[index, d] += sign
    return u, v


def device_gains(devices: tuple[Device, ...], frequency_hz: np.ndarray) -> np.ndarray:
    """(F, D) complex transconductances gm·e^(−jωτ)."""
    omega = 2 * np.pi * frequency_hz
    columns = [d.gm_s * np.exp(-1j * omega * d.delay_s) for d in devices]
    if not columns:
        return np.zeros((frequency_hz.shape[0], 0), dtype=complex)
    return np.stack(columns, axis=1)


def device_stamp(gains: np.ndarray, u: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Σ_d gm_d(f) u_d v_dᵀ as a (F, N, N) stack (each device touches at most four entries)."""
    stamp = np.zeros((gains.shape[0], u.shape[0], u.shape[0]), dtype=complex)
    for d in range(gains.shape[1]):
        for row in np.flatnonzero(u[:, d]):
            for col in np.flatnonzero(v[:, d]):
                stamp[:, row, col] += (u[row, d] * v[col, d]) * gains[:, d]
    return stamp
