"""workers.engine.margin: the least-damped natural frequencies and the closest approaches.

Oracles: scipy.linalg.eig on the MNA pencil of generated amplifiers (``tests/support/sweeps.py``,
``workers.lumped.natural_frequencies``): every pair the margin reports with ζ < 0.3 inside the band
is an eig natural frequency there, frequency within 1 % and ζ = −σ/|s| within 20 % (issue 12),
and the least-damped eig pair of the band (ζ < 0.3) is the first one reported. The closest
approach of NDF is checked against the lumped circuit's own NDF (``normalized_determinant``:
det of the whole MNA matrix with the devices on over off), the return differences against the
same determinant ratio with the devices switched on one at a time (F_k = NDF(1..k)/NDF(1..k−1),
the successive return differences; Bode, 1945, ch. IV).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from tests.support.sweeps import generated, request_at
from workers.engine import CheckOptions, run_check
from workers.lumped.mna import normalized_determinant
from workers.lumped.netlist import VCCS, Circuit

CASES = [(family, seed, band) for family in ("single", "lna", "pair", "compact_pair")
         for seed in range(3) for band in ("realistic", "wide")]


def _band_pairs(poles: np.ndarray, f: np.ndarray) -> np.ndarray:
    size = np.abs(poles)
    return poles[(poles.imag > 0) & (size >= 2 * np.pi * f[0]) & (size <= 2 * np.pi * f[-1])]


@pytest.mark.parametrize(("family", "seed", "band"), CASES)
def test_least_damped_pairs_are_eig_natural_frequencies(family, seed, band):
    circuit = generated(family, seed)
    f = circuit.realistic_hz if band == "realistic" else circuit.wide_hz
    margin = run_check(request_at(circuit, f)).margin
    truth = _band_pairs(circuit.poles, f)
    zeta_truth = -truth.real / np.abs(truth)
    reported = margin.least_damped
    assert len(reported) <= 3
    ratios = [e.damping_ratio for e in reported]
    assert ratios == sorted(ratios)
    for entry in reported:
        s = complex(entry.growth_rate_per_s, 2 * np.pi * entry.frequency_hz)
        assert entry.damping_ratio == pytest.approx(-s.real / abs(s), rel=1e-9)
        if entry.damping_ratio != 0:
            assert entry.q == pytest.approx(1 / (2 * entry.damping_ratio))
        if not 0 < entry.frequency_hz or entry.damping_ratio >= 0.3:
            continue
        k = int(np.argmin(np.abs(truth - s)))
        assert entry.frequency_hz == pytest.approx(truth[k].imag / (2 * np.pi), rel=0.01)
        assert entry.damping_ratio == pytest.approx(zeta_truth[k], rel=0.2)
        assert entry.nodes and entry.devices
    lightest = int(np.argmin(zeta_truth)) if truth.size else None
    if lightest is not None and zeta_truth[lightest] < 0.3:
        assert reported, "a lightly damped pair in the band is not reported"
        assert reported[0].frequency_hz == pytest.approx(truth[lightest].imag / (2 * np.pi),
                                                         rel=0.01)


def _devices_on(circuit: Circuit, names: set[str]) -> Circuit:
    return Circuit(tuple(replace(e, gm_s=0.0) if isinstance(e, VCCS) and e.name not in names
                         else e for e in circuit.elements))


def test_closest_approaches_are_the_lumped_determinant_ratios():
    circuit = generated("lna", 1)
    f = circuit.wide_hz
    request = request_at(circuit, f)
    margin = run_check(request).margin
    case = circuit.case
    ndf = margin.min_abs_ndf
    at = np.array([ndf.frequency_hz])
    assert ndf.value == pytest.approx(abs(normalized_determinant(case.circuit, at,
                                                                 case.terminations)[0]),
                                      rel=1e-3)
    # F_k of the lumped circuit, devices switched on in the request's order
    names = [d.name for d in request.devices]
    previous = np.ones(f.size, dtype=complex)
    best = (np.inf, None, None)
    for k, name in enumerate(names):
        on = normalized_determinant(_devices_on(case.circuit, set(names[:k + 1])), f,
                                    case.terminations)
        magnitude = np.abs(on / previous)
        i = int(np.argmin(magnitude))
        if magnitude[i] < best[0]:
            best = (float(magnitude[i]), float(f[i]), name)
        previous = on
    factor = margin.min_abs_return_difference
    assert factor.value == pytest.approx(best[0], rel=1e-6)
    assert (factor.frequency_hz, factor.device) == (best[1], best[2])
    assert ndf.device in names


def test_without_a_model_the_margin_says_why_and_keeps_the_closest_approaches():
    circuit = generated("single", 0)
    request = request_at(circuit, circuit.wide_hz, options=CheckOptions(refine=False))
    body = run_check(request).to_dict()["margin"]
    assert body["least_damped"] == []
    assert "options.refine" in body["note"]
    assert body["min_abs_ndf"]["value"] > 0 and body["min_abs_return_difference"]["device"]


def test_margin_is_in_every_verdict_with_the_contract_fields():
    circuit = generated("pair", 0)
    body = run_check(request_at(circuit, circuit.realistic_hz)).to_dict()
    assert set(body["margin"]) >= {"least_damped", "min_abs_ndf", "min_abs_return_difference"}
    entry = body["margin"]["least_damped"][0]
    assert set(entry) >= {"frequency_hz", "growth_rate_per_s", "damping_ratio", "q", "nodes",
                          "devices"}
    assert set(body["margin"]["min_abs_ndf"]) == {"value", "frequency_hz", "device"}
