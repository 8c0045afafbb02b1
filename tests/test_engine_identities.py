"""The trade's two ways of computing each quantity agree with the engine.

- NDF as det Y_on / det Y_off (np.linalg.det on small N) vs the product of return differences
  F_k = 1 + T_k, each T_k measured by voltage injection into the broken control of device k on the
  full MNA system (devices 1..k−1 on), vs the engine's NDF and F_k.
- Driving-point admittance as a cofactor ratio det Y / det Y_(kk) vs 1/v_k for a unit current
  injected at node k vs the engine's.
- S → Y vs scikit-rf 2.2's s2y on well-conditioned data.
- A 200-node admittance matrix whose determinant underflows in float64.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from skrf.network import s2y

from service.runner import load_request
from tests.support.circuits import damping, random_amplifier
from tests.support.grids import log_grid
from tests.support.requests import engine_request
from workers.engine import analyse
from workers.engine.conversions import y_from_s
from workers.engine.loops import determinant_ratio, successive_return_differences
from workers.engine.request import Network
from workers.lumped import Circuit, assemble, check_request, port_admittance, s_from_y

SEEDS = [0, 1, 2, 6, 12, 19]  # 2–4 devices each (tests.support.circuits.random_amplifier)


def sample_grid(seed: int) -> np.ndarray:
    """41 log-spaced points from 100× below to 100× above the circuit's natural frequencies."""
    on = random_amplifier(seed).poles_on()
    magnitude = np.abs(on) / (2 * np.pi)
    return np.geomspace(magnitude.min() / 100, magnitude.max() * 100, 41)


def terminated_port_y(circuit: Circuit, rc, f: np.ndarray) -> np.ndarray:
    """Port Y of ``circuit`` at the request's port nodes, plus 1/Z_term on the external ports."""
    nodes = [p.node for p in rc.ports]
    y = port_admittance(circuit, nodes, f)
    for k, port in enumerate(rc.ports):
        if port.role == "external":
            y[:, k, k] += 1 / 50.0
    return y


def injected_return_ratio(circuit: Circuit, device: str, terminations: dict[str, float],
                          f: np.ndarray) -> np.ndarray:
    """T of ``device`` by voltage injection: its control is broken and driven by v_inj = 1 V.

    With the device's own transconductance removed from the MNA matrix M(s) = G + sC, the
    source still drives gm·v_inj out of output+ (into output−), so M x = −gm·(e[o+] − e[o−]);
    the returned control voltage is v_ret = x[c+] − x[c−] and T = −v_ret/v_inj (Bode, Network
    Analysis and Feedback Amplifier Design, 1945, ch. IV: return ratio of a controlled source).
    """
    vccs = circuit.element(device)
    off = Circuit(tuple(replace(e, gm_s=0.0) if e.name == device else e
                        for e in circuit.elements))
    system = assemble(off, terminations)
    index = {label: k for k, label in enumerate(system.labels)}
    rhs = np.zeros(len(system.labels), dtype=complex)
    for node, sign in zip(vccs.output, (1.0, -1.0), strict=True):
        if node in index:
            rhs[index[node]] -= sign * vccs.gm_s
    rhs_stack = np.broadcast_to(rhs[:, None], (f.size, rhs.size, 1))
    x = np.linalg.solve(system.matrix(2j * np.pi * f), rhs_stack)[:, :, 0]
    v_ret = sum(sign * x[:, index[node]]
                for node, sign in zip(vccs.control, (1.0, -1.0), strict=True) if node in index)
    return -v_ret


@pytest.mark.parametrize("seed", SEEDS)
def test_ndf_determinants_equal_product_of_injected_return_differences(seed):
    rc = random_amplifier(seed)
    f = sample_grid(seed)
    names = [d.name for d in rc.circuit.devices]
    analysis = analyse(engine_request(rc.circuit, rc.ports, f))

    # way 1: determinants of the terminated port Y with all devices on and all off
    y_on = terminated_port_y(rc.circuit, rc, f)
    y_off = terminated_port_y(rc.circuit.gain_off(), rc, f)
    ndf_det = np.linalg.det(y_on) / np.linalg.det(y_off)

    # way 2: F_k = 1 + T_k, T_k injected with devices 1..k−1 on and k+1..D off
    f_k = []
    for k, name in enumerate(names):
        later_off = Circuit(tuple(replace(e, gm_s=0.0) if e.name in names[k + 1:] else e
                                  for e in rc.circuit.elements))
        f_k.append(1 + injected_return_ratio(later_off, name, rc.node_terminations, f))
    f_k = np.stack(f_k, axis=1)

    # NDF = Π F_k (telescoping product of det Y(1..k on)/det Y(1..k−1 on); common practice)
    np.testing.assert_allclose(np.prod(f_k, axis=1), ndf_det, rtol=1e-8)
    np.testing.assert_allclose(analysis.loops.ndf, ndf_det, rtol=1e-8)
    np.testing.assert_allclose(analysis.loops.return_difference, f_k, rtol=1e-8, atol=1e-12)
    np.testing.assert_allclose(analysis.loops.return_ratio, f_k - 1, rtol=1e-7, atol=1e-10)


@pytest.mark.parametrize("seed", SEEDS)
def test_driving_point_admittance_cofactor_and_injection(seed):
    rc = random_amplifier(seed)
    f = sample_grid(seed)
    analysis = analyse(engine_request(rc.circuit, rc.ports, f))
    y = terminated_port_y(rc.circuit, rc, f)
    n = y.shape[-1]
    for k in range(n):
        keep = [i for i in range(n) if i != k]
        # cofactor ratio: Y_k = det Y / det Y with row and column k removed (Cramer's rule)
        cofactor = np.linalg.det(y) / np.linalg.det(y[:, keep][:, :, keep])
        # unit current injected at node k: Y v = e_k, Y_k = 1/v_k (definition of the
        # driving-point admittance with every other port open; common practice)
        e_k = np.zeros((f.size, n, 1), dtype=complex)
        e_k[:, k, 0] = 1
        injected = 1 / np.linalg.solve(y, e_k)[:, k, 0]
        np.testing.assert_allclose(cofactor, injected, rtol=1e-8)
        np.testing.assert_allclose(analysis.nodes.admittance[:, k], injected, rtol=1e-8)


def relative_error(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """‖a − b‖/‖b‖ per frequency (Frobenius norm)."""
    return np.linalg.norm(a - b, axis=(1, 2)) / np.linalg.norm(b, axis=(1, 2))


@pytest.mark.parametrize("seed", SEEDS)
def test_y_from_s_matches_scikit_rf(seed):
    # scikit-rf 2.2 s2y with power waves; for real z0 power and pseudo waves coincide (Kurokawa,
    # IEEE Trans. MTT 13(2), 1965). Data: S of a passive lumped circuit (devices off), well
    # conditioned (checked below), with a different real z0 at every port.
    rc = random_amplifier(seed)
    f = sample_grid(seed)
    nodes = [p.node for p in rc.ports]
    rng = np.random.default_rng(seed)
    z0 = rng.uniform(20.0, 120.0, len(nodes))
    y = port_admittance(rc.circuit.gain_off(), nodes, f)
    s = s_from_y(y, z0)
    well = np.linalg.cond(np.eye(len(nodes)) + s) < 1e6
    assert well.sum() >= 20
    ours = y_from_s(s[well], z0)
    assert not ours.singular.any()
    assert relative_error(ours.values, s2y(s[well], z0)).max() < 1e-9
    assert relative_error(ours.values, y[well]).max() < 1e-9


@pytest.mark.parametrize("seed", SEEDS)
def test_s_and_y_requests_give_the_same_ndf(seed):
    # the same circuit given as S (z0 = 50 Ω) or as Y must give the same NDF: the conversion
    # S → Y is exact (Pozar, Microwave Engineering, 4th ed., sec. 4.3)
    rc = random_amplifier(seed)
    on = rc.poles_on()
    assert damping(on) > 0
    f = log_grid(np.abs(on).min() / 2 / np.pi / 100, np.abs(on).max() / 2 / np.pi * 100, 20)
    request_y = engine_request(rc.circuit, rc.ports, f)
    s = s_from_y(request_y.network.values, 50.0)
    request_s = replace(request_y, network=Network("S", s, np.full(len(rc.ports), 50.0)))
    np.testing.assert_allclose(analyse(request_s).loops.ndf, analyse(request_y).loops.ndf,
                               rtol=1e-7)


# ------------------------------------------------------------------------------------------
# 200 nodes: det Y underflows in float64, the engine's NDF does not
# ------------------------------------------------------------------------------------------

N_BLOCKS = 100
DEVICE_BLOCKS = (0, 37, 99)


def block_diagonal_case(seed: int = 7):
    """Y_off: 100 two-node blocks [[g1 + jωc1, −jωcc], [−jωcc, g2 + jωc2]] (entries ~ 10 mS);
    device d in block b: gm from node 2b (control) into node 2b + 1 (output), Y[2b+1, 2b] += gm.
    """
    rng = np.random.default_rng(seed)
    f = np.geomspace(1e7, 1e9, 5)
    w = 2 * np.pi * f
    g1, g2 = rng.uniform(5e-3, 2e-2, (2, N_BLOCKS))
    c1, c2 = rng.uniform(0.1e-12, 1e-12, (2, N_BLOCKS))
    cc = rng.uniform(0.01e-12, 0.1e-12, N_BLOCKS)
    gm = rng.uniform(0.02, 0.1, len(DEVICE_BLOCKS))
    blocks = np.empty((f.size, N_BLOCKS, 2, 2), dtype=complex)
    blocks[:, :, 0, 0] = g1 + 1j * w[:, None] * c1
    blocks[:, :, 1, 1] = g2 + 1j * w[:, None] * c2
    blocks[:, :, 0, 1] = blocks[:, :, 1, 0] = -1j * w[:, None] * cc
    n = 2 * N_BLOCKS
    y_off = np.zeros((f.size, n, n), dtype=complex)
    for b in range(N_BLOCKS):
        y_off[:, 2 * b:2 * b + 2, 2 * b:2 * b + 2] = blocks[:, b]
    u = np.zeros((n, len(DEVICE_BLOCKS)))
    v = np.zeros((n, len(DEVICE_BLOCKS)))
    for d, b in enumerate(DEVICE_BLOCKS):
        u[2 * b + 1, d] = 1.0
        v[2 * b, d] = 1.0
    gains = np.broadcast_to(gm, (f.size, gm.size)).astype(complex)
    y_on = y_off + np.einsum("fd,nd,md->fnm", gains, u, v)
    # Closed form per block: det [[a, b], [c, d]] = ad − bc; the other 97 blocks cancel in the
    # ratio (det of a block-diagonal matrix is the product of the blocks' determinants).
    a_, b_, c_, d_ = (blocks[:, list(DEVICE_BLOCKS), i, j] for i, j in ((0, 0), (0, 1), (1, 0),
                                                                       (1, 1)))
    f_k = (a_ * d_ - b_ * (c_ + gm)) / (a_ * d_ - b_ * c_)
    return y_on, y_off, gains, u, v, f_k


def test_two_hundred_nodes_ndf_where_det_underflows():
    y_on, y_off, gains, u, v, f_k = block_diagonal_case()
    # precondition: float64 det really underflows here (|det| ≈ (1e-4)^100)
    assert np.all(np.linalg.det(y_on) == 0) and np.all(np.linalg.det(y_off) == 0)
    ndf, singular_on, singular_off = determinant_ratio(y_on, y_off)
    assert not singular_on.any() and not singular_off.any()
    np.testing.assert_allclose(ndf, np.prod(f_k, axis=1), rtol=1e-10)
    pivots, singular = successive_return_differences(y_off, gains, u, v)
    assert not singular.any()
    np.testing.assert_allclose(pivots, f_k, rtol=1e-10)


@pytest.mark.parametrize("seed", SEEDS[:3])
def test_json_request_with_gain_off_data_gives_the_same_ndf(seed):
    # Two ways to switch the devices off: subtract their stamps from the data (rank-one terms),
    # or use the exported gain_off state; both are the same det Y_off. The JSON path (S data,
    # z0 = 50 Ω, through service.runner.load_request) must reproduce the direct Y request.
    rc = random_amplifier(seed)
    f = sample_grid(seed)
    direct = analyse(engine_request(rc.circuit, rc.ports, f))
    payload = check_request(
        rc.circuit, [(p.name, p.node, p.role) for p in rc.ports],
        [(d.name, d) for d in rc.circuit.devices], f, parameter="S", include_gain_off=True)
    via_json = analyse(load_request(payload))
    assert via_json.request.gain_off is not None
    assert not any(d.code == "gain_off_mismatch" for d in via_json.diagnostics)
    np.testing.assert_allclose(via_json.loops.ndf, direct.loops.ndf, rtol=1e-7)
    np.testing.assert_allclose(via_json.loops.return_difference, direct.loops.return_difference,
                               rtol=1e-7)
