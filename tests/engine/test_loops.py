"""workers.engine.loops: NDF and the successive return differences F_k.

Oracles:
* NDF straight from the lumped circuit: ``workers.lumped.mna.normalized_determinant`` takes
  det M(jω)/det M₀(jω) of the whole terminated MNA matrix (every internal node and inductor
  current kept), where the engine sees only the port Y. Devices touch port nodes only, so the
  eliminated block is the same with the devices on or off and the ratios agree (Schur's
  determinant formula, det M = det M_rr · det Y_port; Golub & Van Loan, Matrix Computations,
  4th ed., sec. 3.2 — common practice).
* F_k as that same direct ratio between the circuits with devices 1..k and 1..k−1 on.
* The matrix determinant lemma det(Y + g u vᵀ) = det Y · (1 + g vᵀ Y⁻¹ u) (Golub & Van Loan, 4th
  ed., sec. 2.1.4 — common practice), evaluated with numpy on the port matrices, and the
  product identity NDF = Π F_k (a telescoping product; Bode, Network Analysis and Feedback
  Amplifier Design, 1945, ch. IV).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from tests.support.circuits import RandomCircuit, random_amplifier
from tests.support.requests import engine_request
from workers.engine.conversions import batched_inv, device_gains, device_stamp, device_vectors
from workers.engine.loops import (
    determinant_ratio,
    loop_analysis,
    loops_from_impedance,
    successive_return_differences,
)
from workers.lumped import Circuit
from workers.lumped import port_admittance as lumped_port_admittance
from workers.lumped.mna import normalized_determinant

SEEDS = [0, 1, 2, 6, 12, 19]  # 2–4 devices each


def band(rc: RandomCircuit, points: int = 41) -> np.ndarray:
    """Log-spaced from 100× below to 100× above the circuit's natural frequencies."""
    magnitude = np.abs(rc.poles_on()) / (2 * np.pi)
    return np.geomspace(magnitude.min() / 100, magnitude.max() * 100, points)


def terminated_states(rc: RandomCircuit, f: np.ndarray):
    """Y_on and Y_off at the ports with the external terminations, and the device stamps."""
    nodes = [p.node for p in rc.ports]
    t = np.diag([1 / rc.node_terminations[p.node] if p.role == "external" else 0.0
                 for p in rc.ports])
    y_on = lumped_port_admittance(rc.circuit, nodes, f) + t
    y_off = lumped_port_admittance(rc.circuit.gain_off(), nodes, f) + t
    devices = engine_request(rc.circuit, rc.ports, f).devices
    u, v = device_vectors(devices, len(nodes))
    return y_on, y_off, device_gains(devices, f), u, v


def only_first_on(circuit: Circuit, k: int) -> Circuit:
    """The circuit with devices 1..k on (circuit order) and the others off."""
    names = [d.name for d in circuit.devices]
    return Circuit(tuple(replace(e, gm_s=0.0) if e.name in names[k:] else e
                         for e in circuit.elements))


@pytest.mark.parametrize("seed", SEEDS)
def test_ndf_equals_the_direct_determinant_ratio_of_the_mna_matrix(seed):
    rc = random_amplifier(seed)
    f = band(rc)
    direct = normalized_determinant(rc.circuit, f, rc.node_terminations)
    y_on, y_off, gains, u, v = terminated_states(rc, f)
    from_determinants = loop_analysis(y_on, y_off, gains, u, v)
    np.testing.assert_allclose(from_determinants.ndf, direct, rtol=1e-8)
    z_on = batched_inv(y_on)
    from_impedance = loops_from_impedance(z_on.values, z_on.singular, gains, u, v)
    np.testing.assert_allclose(from_impedance.ndf, direct, rtol=1e-8)
    for result in (from_determinants, from_impedance):
        assert not (result.singular_on.any() or result.singular_off.any())


@pytest.mark.parametrize("seed", SEEDS)
def test_return_differences_are_ratios_of_successive_determinants(seed):
    rc = random_amplifier(seed)
    f = band(rc)
    n_dev = len(rc.circuit.devices)
    ndf_k = [np.ones(f.size, dtype=complex)] + [
        normalized_determinant(only_first_on(rc.circuit, k), f, rc.node_terminations)
        for k in range(1, n_dev + 1)]
    expected = np.stack([ndf_k[k + 1] / ndf_k[k] for k in range(n_dev)], axis=1)
    y_on, y_off, gains, u, v = terminated_states(rc, f)
    pivots, singular = successive_return_differences(y_off, gains, u, v)
    assert not singular.any()
    np.testing.assert_allclose(pivots, expected, rtol=1e-8)
    z_on = batched_inv(y_on)
    from_impedance = loops_from_impedance(z_on.values, z_on.singular, gains, u, v)
    np.testing.assert_allclose(from_impedance.return_difference, expected, rtol=1e-8)
    np.testing.assert_allclose(from_impedance.return_ratio, expected - 1, rtol=1e-7,
                               atol=1e-10)
    # product identity: NDF = Π F_k
    np.testing.assert_allclose(np.prod(pivots, axis=1), ndf_k[-1], rtol=1e-8)


@pytest.mark.parametrize("seed", SEEDS[:3])
def test_first_return_difference_is_the_determinant_lemma(seed):
    # F_1 = det(Y_off + g₁u₁v₁ᵀ)/det Y_off = 1 + g₁ v₁ᵀ Y_off⁻¹ u₁ (the lemma, numpy on the ports)
    rc = random_amplifier(seed)
    f = band(rc, 21)
    _, y_off, gains, u, v = terminated_states(rc, f)
    one_on = y_off + device_stamp(gains[:, :1], u[:, :1], v[:, :1])
    by_det = np.linalg.det(one_on) / np.linalg.det(y_off)
    by_lemma = 1 + gains[:, 0] * np.einsum("n,fn->f", v[:, 0],
                                           np.linalg.solve(y_off, u[:, 0].astype(complex)))
    np.testing.assert_allclose(by_lemma, by_det, rtol=1e-9)
    pivots, _ = successive_return_differences(y_off, gains, u, v)
    np.testing.assert_allclose(pivots[:, 0], by_det, rtol=1e-9)


def test_determinant_ratio_flags_singular_states():
    # det = 0 exactly for a zero row (common practice): a singular Y_off leaves NDF undefined,
    # a singular Y_on makes it 0.
    rng = np.random.default_rng(5)
    y_on = rng.normal(size=(4, 3, 3)) + 1j * rng.normal(size=(4, 3, 3)) + 3 * np.eye(3)
    y_off = rng.normal(size=(4, 3, 3)) + 1j * rng.normal(size=(4, 3, 3)) + 3 * np.eye(3)
    y_off[1, 2, :] = 0
    y_on[2, 0, :] = 0
    ratio, singular_on, singular_off = determinant_ratio(y_on, y_off)
    assert singular_off.tolist() == [False, True, False, False]
    assert singular_on.tolist() == [False, False, True, False]
    assert np.isnan(ratio[1]) and ratio[2] == 0
    regular = [0, 3]
    np.testing.assert_allclose(ratio[regular],
                               np.linalg.det(y_on[regular]) / np.linalg.det(y_off[regular]),
                               rtol=1e-12)


def test_no_devices_give_a_unit_ndf():
    # With no devices the on and off states are one circuit: NDF = 1, no return differences.
    y = np.broadcast_to(np.eye(2) * 0.02, (5, 2, 2)).astype(complex)
    gains = np.zeros((5, 0), dtype=complex)
    u = v = np.zeros((2, 0))
    pivots, singular = successive_return_differences(y, gains, u, v)
    assert pivots.shape == (5, 0) and not singular.any()
    z = batched_inv(y)
    result = loops_from_impedance(z.values, z.singular, gains, u, v)
    np.testing.assert_array_equal(result.ndf, np.ones(5))
