"""workers.engine.conversions: port Y from S, Y or Z; external terminations; device stamps.

Oracles: scikit-rf 2.2's ``s2y`` and ``z2y`` (power waves, which for a real z0 equal the pseudo
waves of Pozar, Microwave Engineering, 4th ed., sec. 4.3), numpy's ``linalg.inv``, the reflection
of a one-port load Γ = (Z − z0)/(Z + z0) (common practice), and the lumped MNA simulator
(workers.lumped): a resistor added at a port node, or a transconductance switched off, changes
the port Y by exactly what the engine adds or removes.
"""

from __future__ import annotations

import numpy as np
import pytest
from skrf.network import s2y, z2y

from tests.support.circuits import PortSpec, random_amplifier
from tests.support.requests import engine_request
from workers.engine.conversions import (
    batched_inv,
    batched_solve,
    device_gains,
    device_stamp,
    device_vectors,
    port_admittance,
    termination_admittances,
    y_from_s,
)
from workers.engine.request import CheckRequest, Network, Port
from workers.lumped import VCCS, Capacitor, Circuit, Inductor, Resistor
from workers.lumped import port_admittance as lumped_port_admittance


def random_matrices(seed: int, n_freq: int, n: int, scale: float = 0.4) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return scale * (rng.normal(size=(n_freq, n, n)) + 1j * rng.normal(size=(n_freq, n, n)))


# ---------------------------------------------------------------- S, Z and Y data to port Y


@pytest.mark.parametrize(("n_ports", "seed"), [(1, 1), (2, 2), (3, 3), (5, 5)])
def test_y_from_s_matches_scikit_rf(n_ports, seed):
    # scikit-rf 2.2 s2y with a different real z0 at every port.
    s = random_matrices(seed, 60, n_ports)
    z0 = np.random.default_rng(seed + 100).uniform(20.0, 120.0, n_ports)
    assert np.linalg.cond(np.eye(n_ports) + s).max() < 1e4  # well posed: a fair comparison
    ours = y_from_s(s, z0)
    assert not ours.singular.any()
    np.testing.assert_allclose(ours.values, s2y(s, z0), rtol=1e-10, atol=1e-14)


def test_one_port_y_from_s_is_the_load_admittance():
    # Γ = (Z − z0)/(Z + z0) for a load Z on a real reference z0 (common practice), so
    # Y = 1/Z = (1 − Γ)/(z0 (1 + Γ)).
    z = np.array([10.0, 50.0, 75.0 - 20j, 3.0 + 400j])
    z0 = 50.0
    gamma = (z - z0) / (z + z0)
    ours = y_from_s(gamma[:, None, None], np.array([z0]))
    np.testing.assert_allclose(ours.values[:, 0, 0], 1 / z, rtol=1e-13)


def test_short_circuit_makes_y_singular_there_only():
    # S = −I: every port a short (Γ = −1, common practice), I + S singular, Y unbounded.
    s = random_matrices(7, 9, 3)
    s[4] = -np.eye(3)
    ours = y_from_s(s, np.full(3, 50.0))
    assert ours.singular.tolist() == [k == 4 for k in range(9)]
    assert np.isnan(ours.values[4]).all()
    keep = ~ours.singular
    np.testing.assert_allclose(ours.values[keep], s2y(s[keep], 50.0), rtol=1e-10, atol=1e-14)


def network_request(network: Network) -> CheckRequest:
    n = network.values.shape[-1]
    return CheckRequest(np.linspace(1e9, 2e9, network.values.shape[0]), network,
                        tuple(Port(f"p{k}", "probe") for k in range(n)))


def test_port_admittance_of_each_parameter_type():
    # S through its per-port z0 (scikit-rf s2y), Z by inversion (scikit-rf z2y), Y as given.
    s = random_matrices(11, 20, 3)
    z0 = np.array([25.0, 50.0, 100.0])
    from_s = port_admittance(Network("S", s, z0))
    np.testing.assert_allclose(from_s.values, s2y(s, z0), rtol=1e-10, atol=1e-14)
    z = random_matrices(12, 20, 3, scale=40.0)
    from_z = port_admittance(Network("Z", z, np.full(3, 50.0)))
    np.testing.assert_allclose(from_z.values, z2y(z), rtol=1e-10)
    y = random_matrices(13, 20, 3, scale=0.01)
    from_y = port_admittance(Network("Y", y, np.full(3, 50.0)))
    np.testing.assert_array_equal(from_y.values, y)
    for solved in (from_s, from_z, from_y):
        assert not solved.singular.any()


def test_batched_inverse_flags_singular_frequencies():
    # numpy.linalg.inv where the matrix is regular; a rank-one matrix has no inverse.
    a = random_matrices(21, 8, 4) + 2 * np.eye(4)
    a[3] = np.outer(np.arange(1, 5), np.arange(2, 6))
    inverse = batched_inv(a)
    assert inverse.singular.tolist() == [k == 3 for k in range(8)]
    assert np.isnan(inverse.values[3]).all()
    keep = np.arange(8) != 3
    np.testing.assert_allclose(inverse.values[keep], np.linalg.inv(a[keep]), rtol=1e-12)
    # one right-hand side for every frequency is broadcast: a x = e_0 gives inv(a)[:, :, 0]
    rhs = np.eye(4, dtype=complex)[:, :1]
    solved = batched_solve(a[keep], rhs)
    np.testing.assert_allclose(solved.values[:, :, 0], np.linalg.inv(a[keep])[:, :, 0],
                               rtol=1e-12)


# ---------------------------------------------------------------- terminations


def three_node_circuit() -> Circuit:
    """A passive ladder: in —R— mid —L— out, shunt C at every node (invented values)."""
    return Circuit((
        Resistor("Rs", "in", "mid", 30.0),
        Inductor("Ls", "mid", "out", 2e-9),
        Capacitor("Ci", "in", "0", 1e-12),
        Capacitor("Cm", "mid", "0", 0.5e-12),
        Capacitor("Co", "out", "0", 2e-12),
    ))


def test_terminations_are_the_admittance_of_a_resistor_to_ground():
    # Oracle: the lumped circuit with the terminating resistors added as elements. Port "in" is
    # terminated in its own reference (25 Ω), "out" in an explicit 75 Ω, "mid" is a probe (open).
    circuit = three_node_circuit()
    f = np.geomspace(1e8, 2e10, 40)
    ports = (Port("in", "external"), Port("mid", "probe"), Port("out", "external", 75.0))
    nodes = ["in", "mid", "out"]
    y = lumped_port_admittance(circuit, nodes, f)
    request = CheckRequest(f, Network("Y", y, np.array([25.0, 50.0, 100.0])), ports)
    t = termination_admittances(request)
    np.testing.assert_array_equal(t, [1 / 25.0, 0.0, 1 / 75.0])
    terminated = lumped_port_admittance(
        circuit.with_elements(Resistor("Tin", "in", "0", 25.0), Resistor("Tout", "out", "0", 75.0)),
        nodes, f)
    np.testing.assert_allclose(y + np.diag(t), terminated, rtol=1e-12, atol=1e-15)


def test_complex_termination_is_its_reciprocal():
    # The admittance of an impedance Z is 1/Z (common practice).
    y = np.broadcast_to(np.eye(2) * 0.02, (3, 2, 2)).astype(complex)
    ports = (Port("a", "external", 30 - 40j), Port("b", "external"))
    request = CheckRequest(np.array([1e9, 2e9, 3e9]), Network("S", y, np.array([50.0, 60.0])),
                           ports)
    np.testing.assert_allclose(termination_admittances(request), [1 / (30 - 40j), 1 / 60.0],
                               rtol=1e-15)


# ---------------------------------------------------------------- device stamps


@pytest.mark.parametrize("seed", [0, 1, 2, 6])
def test_device_stamps_are_the_lumped_on_minus_off_difference(seed):
    # Oracle: the MNA stamp of a VCCS (Ho, Ruehli & Brennan, IEEE Trans. CAS 22(6), 1975) seen
    # through workers.lumped's Schur complement: with every device terminal on a port node or
    # ground, Y_on − Y_off at the ports is Σ_d gm_d u_d v_dᵀ, each term a rank-one matrix.
    rc = random_amplifier(seed)
    f = np.geomspace(1e8, 3e10, 25)
    request = engine_request(rc.circuit, rc.ports, f)
    nodes = [p.node for p in rc.ports]
    difference = (lumped_port_admittance(rc.circuit, nodes, f)
                  - lumped_port_admittance(rc.circuit.gain_off(), nodes, f))
    u, v = device_vectors(request.devices, request.n_ports)
    gains = device_gains(request.devices, f)
    stamp = device_stamp(gains, u, v)
    np.testing.assert_allclose(stamp, difference, rtol=1e-9, atol=1e-12 * np.abs(difference).max())
    for d, device in enumerate(request.devices):
        single = device_stamp(gains[:, d:d + 1], u[:, d:d + 1], v[:, d:d + 1])
        singular_values = np.linalg.svd(single, compute_uv=False)
        assert np.all(singular_values[:, 1:] <= 1e-12 * singular_values[:, :1])  # rank one
        # its only non-zero singular value is |gm|·‖u‖‖v‖
        expected = np.abs(device.gm_s) * np.linalg.norm(u[:, d]) * np.linalg.norm(v[:, d])
        np.testing.assert_allclose(singular_values[:, 0], expected, rtol=1e-12)


def test_device_with_source_terminal_and_delay_matches_lumped():
    # A FET-like VCCS with its source on a port (control g−s, output d−s) and a transit delay τ:
    # the lumped MNA stamps gm·e^(−jωτ) (workers.lumped.mna); the engine's stamp must equal
    # Y_on − Y_off, including the signs at the source row and column.
    circuit = Circuit((
        Capacitor("Cgs", "g", "s", 0.4e-12), Capacitor("Cgd", "g", "d", 0.05e-12),
        Resistor("Rds", "d", "s", 300.0), Inductor("Ls", "s", "0", 0.2e-9),
        Resistor("Rg", "g", "0", 1e3), Resistor("Rd", "d", "0", 200.0),
        VCCS("Q", ("g", "s"), ("d", "s"), 0.06, delay_s=3e-12),
    ))
    ports = [PortSpec("g", "g", "probe"), PortSpec("d", "d", "probe"), PortSpec("s", "s", "probe")]
    f = np.geomspace(1e8, 5e10, 30)
    request = engine_request(circuit, ports, f)
    nodes = ["g", "d", "s"]
    difference = (lumped_port_admittance(circuit, nodes, f)
                  - lumped_port_admittance(circuit.gain_off(), nodes, f))
    u, v = device_vectors(request.devices, 3)
    np.testing.assert_array_equal(u[:, 0], [0, 1, -1])   # out of d, back in at s
    np.testing.assert_array_equal(v[:, 0], [1, 0, -1])   # controlled by v_g − v_s
    stamp = device_stamp(device_gains(request.devices, f), u, v)
    np.testing.assert_allclose(stamp, difference, rtol=1e-9, atol=1e-15)
    # the delay is a phase −ωτ on gm (closed form)
    gains = device_gains(request.devices, f)[:, 0]
    np.testing.assert_allclose(np.angle(gains), np.angle(np.exp(-2j * np.pi * f * 3e-12)),
                               atol=1e-12)


def test_no_devices_give_empty_stacks():
    f = np.array([1e9, 2e9, 3e9])
    assert device_gains((), f).shape == (3, 0)
    u, v = device_vectors((), 4)
    assert u.shape == v.shape == (4, 0)
    np.testing.assert_array_equal(device_stamp(device_gains((), f), u, v), np.zeros((3, 4, 4)))
