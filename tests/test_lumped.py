"""The lumped-circuit oracle (workers.lumped) against closed forms, textbooks and scikit-rf."""

from __future__ import annotations

import json

import numpy as np
import pytest
import skrf
from skrf.network import y2s

from service.demo.generate import VARIANTS, demo_frequency_hz, generate_demo
from workers.lumped import (
    VCCS,
    Capacitor,
    Circuit,
    Conductance,
    Inductor,
    Resistor,
    assemble,
    check_request,
    natural_frequencies,
    port_admittance,
    s_from_y,
    to_touchstone,
)
from workers.lumped.families import (
    combined_power_stage,
    parallel_rlc_negative_g,
    phase_shift_oscillator,
    two_stage_lna,
)
from workers.lumped.mna import natural_mode, normalized_determinant

FREQUENCY_HZ = np.geomspace(1e6, 50e9, 41)


def parallel_rlc(r_ohm: float, l_h: float, c_f: float, g_s: float) -> Circuit:
    return Circuit(
        (
            Resistor("R", "a", "0", r_ohm),
            Inductor("L", "a", "0", l_h),
            Capacitor("C", "a", "0", c_f),
            Conductance("G", "a", "0", g_s),
        )
    )


@pytest.mark.parametrize(
    ("r_ohm", "l_h", "c_f", "g_s"),
    [(100.0, 1e-9, 1e-12, 0.0), (50.0, 2.2e-9, 0.5e-12, -0.025), (1e3, 10e-9, 3e-12, -0.0005)],
)
def test_parallel_rlc_driving_point_admittance(r_ohm, l_h, c_f, g_s):
    # Closed form: parallel elements add admittances, Y = G + jωC + 1/(jωL) (circuit theory,
    # common practice).
    w = 2 * np.pi * FREQUENCY_HZ
    expected = 1 / r_ohm + g_s + 1j * w * c_f + 1 / (1j * w * l_h)
    y = port_admittance(parallel_rlc(r_ohm, l_h, c_f, g_s), ["a"], FREQUENCY_HZ)
    assert y.shape == (FREQUENCY_HZ.size, 1, 1)
    np.testing.assert_allclose(y[:, 0, 0], expected, rtol=1e-12)


@pytest.mark.parametrize(
    ("r_ohm", "l_h", "c_f", "g_s"),
    [
        (100.0, 1e-9, 1e-12, 0.0),  # damped
        (100.0, 1e-9, 1e-12, -0.012),  # net −2 mS: growing
        (50.0, 2.2e-9, 0.5e-12, -0.02),  # net 0: on the axis
        (1e3, 10e-9, 3e-12, -0.0015),
    ],
)
def test_parallel_rlc_natural_frequencies(r_ohm, l_h, c_f, g_s):
    # Closed form: s² + (G/C)s + 1/(LC) = 0 → s = −G/2C ± j√(1/LC − (G/2C)²) (second-order
    # characteristic equation of the parallel RLC; common practice).
    g = 1 / r_ohm + g_s
    alpha = -g / (2 * c_f)
    wd = np.sqrt(1 / (l_h * c_f) - alpha**2)
    s = natural_frequencies(parallel_rlc(r_ohm, l_h, c_f, g_s))
    assert s.size == 2
    expected = np.array([alpha + 1j * wd, alpha - 1j * wd])
    scale = 1 / np.sqrt(l_h * c_f)
    by_imag = s[np.argsort(s.imag)]
    np.testing.assert_allclose(by_imag, expected[np.argsort(expected.imag)], atol=1e-10 * scale)


def test_termination_adds_loss_to_natural_frequencies():
    # Closed form: a 50 Ω load adds 20 mS in parallel, so Re s = −(G + 1/50)/2C.
    c_f, l_h = 1e-12, 1e-9
    s = natural_frequencies(parallel_rlc(1e3, l_h, c_f, -0.02), terminations={"a": 50.0})
    g = 1e-3 - 0.02 + 0.02
    np.testing.assert_allclose(s.real, -g / (2 * c_f) * np.ones(2), rtol=1e-9)


def abcd_to_y(a, b, c, d):
    # Pozar, Microwave Engineering, 4th ed., Table 4.2 (ABCD → Y), from memory:
    # Y11 = D/B, Y12 = (BC − AD)/B, Y21 = −1/B, Y22 = A/B.
    return np.stack([np.stack([d / b, (b * c - a * d) / b], -1), np.stack([-1 / b, a / b], -1)], -2)


def test_pi_network_two_port_matches_abcd_closed_form():
    # Pozar, 4th ed., Table 4.1 (from memory): π network with shunt Y1 at port 1, series Y3,
    # shunt Y2 at port 2: A = 1 + Y2/Y3, B = 1/Y3, C = Y1 + Y2 + Y1Y2/Y3, D = 1 + Y1/Y3.
    r, l_s, c1, c2 = 4.7, 3.3e-9, 1.2e-12, 0.8e-12
    circuit = Circuit(
        (
            Capacitor("C1", "p1", "0", c1),
            Resistor("Rs", "p1", "m", r),
            Inductor("Ls", "m", "p2", l_s),
            Capacitor("C2", "p2", "0", c2),
        )
    )
    w = 2 * np.pi * FREQUENCY_HZ
    y1, y2, y3 = 1j * w * c1, 1j * w * c2, 1 / (r + 1j * w * l_s)
    expected = abcd_to_y(1 + y2 / y3, 1 / y3, y1 + y2 + y1 * y2 / y3, 1 + y1 / y3)
    y = port_admittance(circuit, ["p1", "p2"], FREQUENCY_HZ)
    np.testing.assert_allclose(y, expected, rtol=1e-10, atol=1e-15)


def test_t_network_two_port_matches_abcd_closed_form():
    # Pozar, 4th ed., Table 4.1 (from memory): T network with series Z1, shunt Z3, series Z2:
    # A = 1 + Z1/Z3, B = Z1 + Z2 + Z1Z2/Z3, C = 1/Z3, D = 1 + Z2/Z3.
    l1, r2, l2, c3 = 1.5e-9, 10.0, 2.7e-9, 2.2e-12
    circuit = Circuit(
        (
            Inductor("L1", "p1", "t", l1),
            Resistor("R2", "t", "m", r2),
            Inductor("L2", "m", "p2", l2),
            Capacitor("C3", "t", "0", c3),
        )
    )
    w = 2 * np.pi * FREQUENCY_HZ
    z1, z2, z3 = 1j * w * l1, r2 + 1j * w * l2, 1 / (1j * w * c3)
    expected = abcd_to_y(1 + z1 / z3, z1 + z2 + z1 * z2 / z3, 1 / z3, 1 + z2 / z3)
    y = port_admittance(circuit, ["p1", "p2"], FREQUENCY_HZ)
    np.testing.assert_allclose(y, expected, rtol=1e-9, atol=1e-15)


def active_circuit() -> Circuit:
    """A non-reciprocal test circuit: two FET-like VCCS (one delayed), reactive embedding."""
    rng = np.random.default_rng(20261202)
    values = rng.uniform(0.5, 2.0, size=12)
    return Circuit(
        (
            Capacitor("Cgs1", "g1", "s1", 0.4e-12 * values[0]),
            Capacitor("Cgd1", "g1", "d1", 0.05e-12 * values[1]),
            Resistor("Rds1", "d1", "s1", 300 * values[2]),
            Inductor("Ls1", "s1", "0", 0.2e-9 * values[3]),
            VCCS("Q1", ("g1", "s1"), ("d1", "s1"), 0.04 * values[4], delay_s=1.5e-12),
            Inductor("Lm", "d1", "g2", 2e-9 * values[5]),
            Resistor("Rb", "g2", "0", 500 * values[6]),
            Capacitor("Cgs2", "g2", "0", 0.6e-12 * values[7]),
            Capacitor("Cgd2", "g2", "d2", 0.08e-12 * values[8]),
            Resistor("Rds2", "d2", "0", 200 * values[9]),
            VCCS("Q2", ("g2", "0"), ("d2", "0"), 0.06 * values[10]),
            Inductor("Lin", "in", "g1", 3e-9 * values[11]),
        )
    )


def test_schur_complement_equals_inverse_of_injected_current_impedance():
    # Independent computation: inject a unit current at each port node in turn into the full
    # MNA system, read the port voltages → Z; the port Y must equal Z⁻¹ (definition of Z).
    # Above 100 MHz the port Y of this circuit is well conditioned (cond < 2e6), so Z⁻¹ is accurate.
    frequency_hz = np.geomspace(100e6, 50e9, 23)
    circuit = active_circuit()
    ports = ["in", "g1", "s1", "d1", "d2"]
    y = port_admittance(circuit, ports, frequency_hz)
    system = assemble(circuit)
    m = system.matrix(2j * np.pi * frequency_hz)
    rows = [system.labels.index(node) for node in ports]
    rhs = np.zeros((len(system.labels), len(ports)))
    rhs[rows, np.arange(len(ports))] = 1.0
    z = np.linalg.solve(m, np.broadcast_to(rhs, (frequency_hz.size, *rhs.shape)))[:, rows, :]
    y_from_z = np.linalg.inv(z)
    scale = np.linalg.norm(y, axis=(1, 2))[:, None, None]
    assert np.all(np.abs(y - y_from_z) <= 1e-10 * scale)


def test_vccs_stamp_between_ports():
    # The VCCS stamp of the check-request contract (common MNA practice, Ho, Ruehli & Brennan
    # 1975): Y[o+,c+] += gm, Y[o+,c−] −= gm, Y[o−,c+] −= gm, Y[o−,c−] += gm.
    gm = 0.05
    circuit = Circuit(
        (
            Resistor("Ra", "a", "0", 100.0),
            Resistor("Rb", "b", "0", 200.0),
            Resistor("Rc", "c", "0", 300.0),
            Resistor("Rd", "d", "0", 400.0),
            VCCS("Q", ("a", "b"), ("c", "d"), gm),
        )
    )
    expected = np.diag([1 / 100, 1 / 200, 1 / 300, 1 / 400]).astype(complex)
    expected[2, 0] += gm
    expected[2, 1] -= gm
    expected[3, 0] -= gm
    expected[3, 1] += gm
    y = port_admittance(circuit, ["a", "b", "c", "d"], np.array([0.0, 1e9]))
    np.testing.assert_allclose(y, np.broadcast_to(expected, y.shape), atol=1e-15)


def test_zero_hertz_when_mna_is_regular():
    # Closed form at DC: capacitors open, inductors short → R1 ∥ (R2 via L) seen at the port.
    circuit = Circuit(
        (
            Resistor("R1", "a", "0", 100.0),
            Inductor("L", "a", "b", 1e-9),
            Resistor("R2", "b", "0", 25.0),
            Capacitor("C", "a", "0", 1e-12),
        )
    )
    y = port_admittance(circuit, ["a"], np.array([0.0, 1e6]))
    np.testing.assert_allclose(y[0, 0, 0], 1 / 100 + 1 / 25, rtol=1e-12)
    assert np.isfinite(y).all()


def test_zero_hertz_with_isolated_node_is_an_error():
    circuit = Circuit((Capacitor("C", "a", "b", 1e-12), Resistor("R", "a", "0", 50.0)))
    with pytest.raises(ValueError, match="singular"):
        port_admittance(circuit, ["a"], np.array([0.0, 1e9]))


def test_delayed_vccs_has_no_rational_natural_frequencies():
    with pytest.raises(ValueError, match="delay"):
        natural_frequencies(active_circuit())


@pytest.mark.parametrize("z0", [50.0, [50.0, 25.0]])
def test_s_from_y_matches_scikit_rf(z0):
    # Reference library: scikit-rf 2.2 skrf.network.y2s (power waves; equal to pseudo-waves and
    # to Pozar 4th ed. sec. 4.3 for real z0).
    circuit = active_circuit()
    y = port_admittance(circuit, ["in", "d2"], FREQUENCY_HZ)
    np.testing.assert_allclose(s_from_y(y, z0), y2s(y, z0=np.array(z0)), atol=1e-12)


@pytest.mark.parametrize("ports", [["in", "d2"], ["in", "g1", "s1", "d1", "g2", "d2"]])
def test_touchstone_text_reads_back_in_scikit_rf(tmp_path, ports):
    # Reference reader: scikit-rf 2.2 parses Touchstone v1 (IBIS Touchstone spec v1.1), which
    # fixes the 2-port order N11 N21 N12 N22 and the row layout with ≤ 4 pairs per line.
    y = port_admittance(active_circuit(), ports, FREQUENCY_HZ)
    s = s_from_y(y, 50.0)
    path = tmp_path / f"oracle.s{len(ports)}p"
    path.write_text(to_touchstone(FREQUENCY_HZ, s, 50.0, comments=["invented test data"]))
    network = skrf.Network(str(path))
    np.testing.assert_allclose(network.f, FREQUENCY_HZ, rtol=1e-12)
    np.testing.assert_allclose(network.s, s, atol=1e-11)
    np.testing.assert_allclose(network.z0, 50.0)


def test_check_request_devices_and_stamp_consistency():
    # Contract check: device terminals map to port names (ground → null), and since every
    # device terminal is a port, Y(on) − Y(gain off) is exactly the contract's rank-one stamp.
    circuit = active_circuit()
    ports = [
        ("in", "in", "external"),
        ("g1", "g1", "probe"),
        ("s1", "s1", "probe"),
        ("d1", "d1", "probe"),
        ("g2", "g2", "probe"),
        ("d2", "d2", "external"),
    ]
    devices = [(v.name, v) for v in circuit.devices]
    request = check_request(
        circuit,
        ports,
        devices,
        FREQUENCY_HZ,
        parameter="Y",
        terminations={"d2": 75.0},
        include_gain_off=True,
    )
    assert request["devices"][0]["control"] == ["g1", "s1"]
    assert request["devices"][0]["output"] == ["d1", "s1"]
    assert request["devices"][0]["delay_s"] == 1.5e-12
    assert request["devices"][1]["control"] == ["g2", None]
    assert request["ports"][5] == {"name": "d2", "role": "external", "termination_ohm": 75.0}
    on = np.array(request["data"]["re"]) + 1j * np.array(request["data"]["im"])
    off = np.array(request["gain_off"]["data"]["re"]) + 1j * np.array(
        request["gain_off"]["data"]["im"]
    )
    names = [p[0] for p in ports]
    stamp = np.zeros(on.shape, dtype=complex)
    w = 2 * np.pi * FREQUENCY_HZ
    for device in request["devices"]:
        gm = device["gm_s"] * np.exp(-1j * w * device.get("delay_s", 0.0))
        for o_name, so in zip(device["output"], (1, -1), strict=True):
            for c_name, sc in zip(device["control"], (1, -1), strict=True):
                if o_name is not None and c_name is not None:
                    stamp[:, names.index(o_name), names.index(c_name)] += so * sc * gm
    np.testing.assert_allclose(on - off, stamp, atol=1e-12)


def test_check_request_rejects_device_terminal_without_port():
    circuit = active_circuit()
    with pytest.raises(ValueError, match="no port"):
        check_request(
            circuit, [("in", "in", "external")], [("Q2", circuit.element("Q2"))], FREQUENCY_HZ
        )


@pytest.mark.parametrize(("r_ohm", "c_f"), [(1e3, 1e-9), (100.0, 1e-12)])
def test_phase_shift_oscillator_critical_gain(r_ohm, c_f):
    # Textbook: an inverting amplifier around three equal RC low-pass sections oscillates for
    # gain 29 at ω = √6/(RC) (e.g. Sedra & Smith, Microelectronic Circuits; quoted from memory).
    # The family's amplifier has R_out = 1e-6·R, so the tolerance on Re s and Im s is 1e-5·ω.
    w0 = np.sqrt(6) / (r_ohm * c_f)
    at_critical = phase_shift_oscillator(29.0, r_ohm, c_f).natural_frequencies()
    oscillating = at_critical[np.argmax(at_critical.imag)]
    assert abs(oscillating.real) / w0 < 1e-5
    assert abs(oscillating.imag / w0 - 1) < 1e-5
    assert phase_shift_oscillator(28.0, r_ohm, c_f).natural_frequencies().real.max() < 0
    assert phase_shift_oscillator(30.0, r_ohm, c_f).natural_frequencies().real.max() > 0


@pytest.mark.parametrize("g_neg_s", [-3e-3, -5e-3, -6e-3, -20e-3])
def test_negative_conductance_tank_family_matches_closed_form(g_neg_s):
    # Closed form as above with G = 1/R + g_neg (the VCCS with control = output is a conductance).
    case = parallel_rlc_negative_g(200.0, 1e-9, 2e-12, g_neg_s)
    g = 1 / 200.0 + g_neg_s
    alpha = -g / (2 * 2e-12)
    expected = alpha + 1j * np.sqrt(complex(1 / (1e-9 * 2e-12) - alpha**2))
    s = case.natural_frequencies()
    upper = s[np.argmax(s.imag)] if np.any(s.imag > 0) else s[np.argmax(s.real)]
    np.testing.assert_allclose(upper, expected, rtol=1e-9)


def rollett_mu(s: np.ndarray) -> np.ndarray:
    """Edwards & Sinsky, IEEE Trans. MTT 40(12), 1992: mu = (1 − |S11|²) /
    (|S22 − Δ·S11*| + |S12·S21|); mu > 1 ⇔ unconditionally stable two-port."""
    s11, s12, s21, s22 = s[:, 0, 0], s[:, 0, 1], s[:, 1, 0], s[:, 1, 1]
    delta = s11 * s22 - s12 * s21
    return (1 - abs(s11) ** 2) / (abs(s22 - delta * np.conj(s11)) + abs(s12 * s21))


def test_combined_stage_odd_mode_is_invisible_at_external_ports():
    # Even/odd-mode analysis of a symmetric circuit (common practice): a drain-to-drain resistor
    # carries no current in the even mode, so the in/out two-port cannot depend on it, while the
    # odd mode (antisymmetric node voltages, zero at the split and combining nodes) can grow.
    frequency_hz = np.geomspace(1e6, 1e12, 301)
    cases = {ohm: combined_power_stage(odd_mode_ohm=ohm) for ohm in (20.0, 300.0, None)}
    y_ext = {
        ohm: port_admittance(case.circuit, ["in", "out"], frequency_hz)
        for ohm, case in cases.items()
    }
    scale = np.abs(y_ext[20.0]).max(axis=(1, 2))[:, None, None]
    for ohm in (300.0, None):
        assert np.all(np.abs(y_ext[ohm] - y_ext[20.0]) <= 1e-9 * scale)
    assert np.all(rollett_mu(s_from_y(y_ext[20.0])) > 1)
    assert cases[20.0].natural_frequencies().real.max() < 0
    for ohm in (300.0, None):
        s = cases[ohm].natural_frequencies()
        growing = s[(s.real > 0) & (s.imag > 0)]
        assert growing.size == 1
        right, left = natural_mode(cases[ohm].circuit, growing[0], cases[ohm].terminations)
        assert abs(right["d_a"] + right["d_b"]) < 1e-9
        assert abs(right["g_a"] + right["g_b"]) < 1e-9
        assert max(abs(right[n]) for n in ("in", "out", "split", "comb")) < 1e-9
        assert max(abs(left[n]) for n in ("in", "out")) < 1e-9


def test_lna_bias_feed_oscillation_is_low_frequency_only():
    # Design check of the family: with the gate-return damping resistor the circuit is stable;
    # without it exactly one growing pair appears, below 1 GHz (the bias feed), none in the RF band.
    assert two_stage_lna().natural_frequencies().real.max() < 0
    s = two_stage_lna(gate_return_damping_ohm=None).natural_frequencies()
    growing = s[(s.real > 0) & (s.imag > 0)]
    assert growing.size == 1
    assert 50e6 < growing[0].imag / (2 * np.pi) < 1e9


@pytest.mark.parametrize("g_neg_s", [-3e-3, -6e-3])
def test_normalized_determinant_of_tank_matches_closed_form(g_neg_s):
    # Closed form: one node, so NDF = det M/det M0 = (G + g + jωC + 1/jωL)/(G + jωC + 1/jωL)
    # (Platzker, Struble & Hetzler, IEEE MTT-S Digest 1985: NDF = Δ/Δ0).
    r_ohm, l_h, c_f = 200.0, 1e-9, 2e-12
    case = parallel_rlc_negative_g(r_ohm, l_h, c_f, g_neg_s)
    w = 2 * np.pi * FREQUENCY_HZ
    passive = 1 / r_ohm + 1j * w * c_f + 1 / (1j * w * l_h)
    ndf = normalized_determinant(case.circuit, FREQUENCY_HZ, case.terminations)
    np.testing.assert_allclose(ndf, (passive + g_neg_s) / passive, rtol=1e-10)


@pytest.mark.slow
def test_demo_scenario(tmp_path):
    written = generate_demo(tmp_path)
    truth = json.loads((tmp_path / "truth.json").read_text())
    variants = truth["variants"]
    assert 12 <= len(variants) <= 16
    assert len({p.name for p in written}) == len(written)
    maps = {t: json.loads((tmp_path / f"{t}_map.json").read_text()) for t in ("lna", "pa")}
    frequency_hz = demo_frequency_hz()
    for variant in VARIANTS:
        entry = variants[variant.stem]
        case = variant.build()
        # Reference reader: scikit-rf 2.2 reads the Touchstone v1 file back.
        network = skrf.Network(str(tmp_path / entry["file"]))
        expected = s_from_y(port_admittance(case.circuit, case.port_nodes, frequency_hz))
        np.testing.assert_allclose(network.s, expected, atol=5e-9)
        assert [p["name"] for p in maps[variant.topology]["ports"]] == [p[0] for p in case.ports]
        # truth.json against a fresh eig, and NDF back near its limits at both grid ends
        s = case.natural_frequencies()
        assert entry["oscillates"] == bool(np.any(s.real > 0))
        assert max(entry["ndf_closure"].values()) < 0.05
    odd_only = [
        v
        for v in variants.values()
        if v["topology"] == "pa"
        and v["unstable"]
        and all(u["mode"] == "odd" and u["external_port_weight"] < 1e-9 for u in v["unstable"])
    ]
    assert odd_only
    bias_only = [
        v
        for v in variants.values()
        if v["topology"] == "lna"
        and v["unstable"]
        and all(u["frequency_hz"] < 1e9 for u in v["unstable"])
    ]
    assert bias_only
    assert any(not v["oscillates"] for v in variants.values())
