"""workers.engine.identify: where a mode shows and what drives it, against eig of the MNA pencil.

Oracles: ``workers.lumped.natural_mode`` — the right and left null vectors v, w of the MNA matrix
M(s₀) at the natural frequency s₀ from ``scipy.linalg.eig`` — give the mode's voltage shape |v_k|
and, for a port node k, the diagonal residue of Z_kk ∝ v_k·w_k (common practice: the residue of
M⁻¹ at a simple zero of det M is v·wᵀ / (wᵀM′v)); a central difference of the eig natural
frequency in each device's gm gives its participation |gm_k ∂s₀/∂gm_k|.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from tests.support.sweeps import generated, request_at, suite
from workers.engine import run_check
from workers.lumped.mna import natural_frequencies, natural_mode

UNSTABLE = [c for c in suite(8) if c.rhp_count][:12]


def _modes(circuit):
    verdict = run_check(request_at(circuit, circuit.wide_hz))
    assert verdict.verdict == "unstable"
    return verdict.modes


@pytest.mark.parametrize("circuit", UNSTABLE, ids=[c.name for c in UNSTABLE])
def test_nodes_are_ranked_by_the_modes_voltage_shape(circuit):
    mode = _modes(circuit)[0]
    truth = circuit.unstable[np.argmin(np.abs(np.abs(circuit.unstable.imag) / (2 * np.pi)
                                               - mode.frequency_hz))]
    right, left = natural_mode(circuit.case.circuit, truth, circuit.case.terminations)
    names = {name: node for name, node, _ in circuit.case.ports}
    shape = {name: abs(right[node]) for name, node in names.items()}
    top = max(shape.values())
    # the engine's top node is eig's, or tied with it within 1 %
    assert shape[mode.nodes[0]] >= 0.99 * top
    for name, weight in zip(mode.nodes, mode.node_participation, strict=True):
        assert weight == pytest.approx(shape[name] / top, abs=0.02)
    leverage = {name: abs(right[node] * left[node]) for name, node in names.items()}
    strongest = max(zip(mode.node_leverage, mode.nodes, strict=True))[1]
    assert leverage[strongest] >= 0.99 * max(leverage.values())


def _participation(circuit, s0: complex, step: float = 1e-6) -> dict[str, float]:
    def moved(name: str, factor: float) -> complex:
        device = circuit.case.circuit.element(name)
        changed = circuit.case.circuit.without(name).with_elements(
            replace(device, gm_s=device.gm_s * factor))
        s = natural_frequencies(changed, circuit.case.terminations)
        return complex(s[np.argmin(np.abs(s - s0))])

    raw = {name: abs(moved(name, 1 + step) - moved(name, 1 - step)) / (2 * step)
           for name, _ in circuit.case.devices}
    top = max(raw.values())
    return {name: value / top for name, value in raw.items()}


def test_both_devices_of_a_symmetric_pair_carry_its_odd_mode():
    circuit = next(c for c in (generated("pair", s) for s in range(40))
                   if c.rhp_count and abs(c.unstable[0]) / (2 * np.pi) > 1e9)
    mode = _modes(circuit)[0]
    expected = _participation(circuit, circuit.unstable[0])
    assert set(mode.devices) == set(expected)  # both, not only the first switched on
    for name, share in zip(mode.devices, mode.device_participation, strict=True):
        assert share == pytest.approx(expected[name], abs=0.02)


def test_a_single_stage_mode_names_its_device():
    circuit = next(c for c in (generated("single", s) for s in range(60)) if c.rhp_count)
    (device,) = (name for name, _ in circuit.case.devices)
    assert _modes(circuit)[0].devices == [device]


def test_a_fit_that_reuses_another_fits_solver_is_numpys_least_squares_fit():
    # fit_nodes(..., like=) reuses the SVD of the basis; the reference is np.linalg.lstsq on the
    # same column-normalised partial-fraction basis at ±jω (the module docstring's solve)
    from workers.engine.identify import fit_nodes

    rng = np.random.default_rng(5)
    f = np.geomspace(1e8, 1e10, 150)
    poles = np.array([-3e8 + 2e10j, -3e8 - 2e10j, -5e9 + 0j, -1e8 + 4e10j, -1e8 - 4e10j])
    scale = 2 * np.pi * 1e10
    s = 2j * np.pi * f
    residues = rng.normal(size=(5, 4)) + 1j * rng.normal(size=(5, 4))
    residues[1], residues[4] = np.conj(residues[0]), np.conj(residues[3])  # a real circuit's
    residues[2] = residues[2].real
    z = (1.0 / (s[:, None] - poles[None, :])) @ residues * scale + rng.normal(size=4)
    first = fit_nodes(f, z[:, :2], poles, scale)
    second = fit_nodes(f, z[:, 2:], first.poles_rad_s, scale, like=first)
    assert second.solver is first.solver
    x = np.concatenate([s, -s]) / scale
    p = poles / scale
    basis = np.concatenate([1 / (x[:, None] - p[None, :]), np.ones((x.size, 1)), x[:, None]], 1)
    norms = np.linalg.norm(basis, axis=0)
    target = np.concatenate([z[:, 2:], np.conj(z[:, 2:])])
    reference = np.linalg.lstsq(basis / norms, target, rcond=None)[0] / norms[:, None]
    np.testing.assert_allclose(second.residues, reference[:5] * scale, rtol=1e-9, atol=1e-9 *
                               np.abs(reference[:5] * scale).max())
    np.testing.assert_allclose(second.constant, reference[5], rtol=1e-9,
                               atol=1e-9 * np.abs(reference[5]).max())
    assert np.all(second.error < 1e-8)
