"""workers.engine.stabilisers (and advice, band_cost, secular): stabilisers computed on the data.

Oracles, all outside the engine:
* the lumped circuit with the suggested resistor added (``workers.lumped``): its natural
  frequencies from scipy.linalg.eig on the MNA pencil (no right-half-plane one, the least-damped
  ζ in the band at least the target and equal to the one reported), its NDF
  (``normalized_determinant``: det of the whole MNA matrix, devices on over off) for the rank-one
  count, and its external two-port (``port_admittance`` at in and out, the probes left open) for
  the in-band cost, converted by scikit-rf 2.2 (``y2s``, ``Network.max_gain``: MAG where K > 1,
  else MSG);
* the families' known fixes: the odd mode of a paralleled pair is damped by a resistor between
  the pair (the plane of symmetry is a virtual ground, so the resistor carries only odd-mode
  current: common practice), which costs nothing in the even-mode operating band.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
import skrf
from skrf.network import y2s

from tests.support.circuits import random_amplifier
from tests.support.requests import engine_request
from tests.support.sweeps import SweepCircuit, request_at
from workers.engine import CheckOptions, analyse, refine_analysis, run_check
from workers.engine.margin import node_model
from workers.engine.request import Network
from workers.engine.stabilisers import Placement, StabiliserSearch
from workers.lumped import GROUND, Resistor, natural_frequencies, port_admittance
from workers.lumped.families import combined_power_stage, two_stage_lna
from workers.lumped.mna import normalized_determinant

WIDE_HZ = np.geomspace(1e6, 1e11, 801)


def _sweep(case):
    return SweepCircuit(case.name, case.name, case, 1e10, WIDE_HZ, WIDE_HZ)


def _with_part(case, hint):
    node = {name: n for name, n, _ in case.ports}
    other = GROUND if hint.between[1] is None else node[hint.between[1]]
    return case.circuit.with_elements(Resistor("Radded", node[hint.between[0]], other,
                                               hint.resistance_ohm))


def _least_damped_in_band(poles: np.ndarray) -> float:
    size = np.abs(poles)
    band = poles[(poles.imag >= 0) & (size >= 2 * np.pi * WIDE_HZ[0])
                 & (size <= 2 * np.pi * WIDE_HZ[-1])]
    return float(np.min(-band.real / np.abs(band)))


def _assert_fixed_by_eig(case, hint, target: float) -> None:
    poles = natural_frequencies(_with_part(case, hint), case.terminations)
    assert poles.real.max() < 0, f"{hint.between} leaves a growing natural frequency"
    zeta = _least_damped_in_band(poles)
    assert zeta >= target * (1 - 1e-6)
    assert hint.achieved_damping_ratio == pytest.approx(zeta, rel=1e-4)


def test_odd_mode_of_a_pair_is_fixed_best_by_a_resistor_between_the_pair():
    case = combined_power_stage(odd_mode_ohm=None)
    verdict = run_check(request_at(_sweep(case), WIDE_HZ))
    assert verdict.verdict == "unstable" and verdict.modes[0].symmetry == "odd"
    best = verdict.hints[0]
    assert set(best.between) in ({"d_a", "d_b"}, {"g_a", "g_b"})
    assert best.meets_target and best.unstable_count_after == 0
    assert all(best.conductance_s < h.conductance_s for h in verdict.hints[1:])
    _assert_fixed_by_eig(case, best, 0.05)
    hint = verdict.modes[0].hint
    assert hint.between == best.between and hint.shunt_resistance_ohm == best.resistance_ohm


def test_bias_feed_mode_is_fixed_by_every_element_suggested():
    case = two_stage_lna(gate_return_damping_ohm=None)
    verdict = run_check(request_at(_sweep(case), WIDE_HZ))
    mode = verdict.modes[0]
    assert verdict.verdict == "unstable" and mode.frequency_hz == pytest.approx(145.4e6, rel=0.01)
    assert verdict.hints and mode.hints
    for hint in verdict.hints:
        assert hint.meets_target
        _assert_fixed_by_eig(case, hint, 0.05)
    assert mode.hint.between == mode.hints[0].between


def test_stable_check_below_the_target_gets_suggestions_and_one_above_it_none():
    case = two_stage_lna()  # least-damped pair ζ ≈ 0.062 (eig)
    plain = run_check(request_at(_sweep(case), WIDE_HZ))
    assert plain.verdict == "stable" and plain.hints == []
    assert plain.margin.least_damped[0].damping_ratio == pytest.approx(
        _least_damped_in_band(case.natural_frequencies()), rel=1e-3)
    strict = run_check(request_at(_sweep(case), WIDE_HZ,
                                  options=CheckOptions(target_damping_ratio=0.1)))
    assert strict.verdict == "stable" and strict.hints
    for hint in strict.hints:
        _assert_fixed_by_eig(case, hint, 0.1)


def _search(request, placements):
    analysis = analyse(request)
    return StabiliserSearch(analysis, node_model(analysis, refine_analysis(analysis)), 0.05,
                            placements)


@pytest.mark.parametrize("with_gain_off", [False, True])
def test_ndf_with_a_part_is_the_lumped_ndf_with_it(with_gain_off):
    # det(Y + G e eᵀ) = det Y (1 + G eᵀ Y⁻¹ e) (matrix determinant lemma), on and off
    rc = random_amplifier(3)
    f = np.geomspace(1e8, 4e10, 120)
    request = engine_request(rc.circuit, rc.ports, f)
    if with_gain_off:
        off = port_admittance(rc.circuit.gain_off(), [p.node for p in rc.ports], f)
        request = replace(request, gain_off=Network("Y", off, request.network.z0_ohm))
    names = [p.name for p in rc.ports]
    probes = [k for k, p in enumerate(rc.ports) if p.role == "probe"]
    placements = [Placement(probes[0], None), Placement(probes[1], probes[2])]
    search = _search(request, placements)
    for m, p in enumerate(placements):
        g = 0.013
        with np.errstate(all="ignore"):
            ours = search.ndf * (1 + g * search.phi_on[:, m]) / (1 + g * search.phi_off[:, m])
        other = GROUND if p.second is None else rc.ports[p.second].node
        part = Resistor("Rpart", rc.ports[p.first].node, other, 1 / g)
        truth = normalized_determinant(rc.circuit.with_elements(part), search.frequency_hz,
                                       rc.node_terminations)
        np.testing.assert_allclose(ours, truth, rtol=1e-8, err_msg=f"{names[p.first]} {p}")


def test_roots_with_a_part_are_the_eig_natural_frequencies():
    case = combined_power_stage(odd_mode_ohm=None)
    request = request_at(_sweep(case), WIDE_HZ)
    names = [name for name, _, _ in case.ports]
    placements = [Placement(names.index("g_a"), None),
                  Placement(names.index("d_a"), names.index("d_b"))]
    search = _search(request, placements)
    for m, p in enumerate(placements):
        for ohms in (20.0, 300.0):
            trial = search.trial(m, 1 / ohms, with_count=False)
            node = {name: n for name, n, _ in case.ports}
            other = GROUND if p.second is None else node[names[p.second]]
            poles = natural_frequencies(case.circuit.with_elements(
                Resistor("Rpart", node[names[p.first]], other, ohms)), case.terminations)
            assert trial.damping_ratio == pytest.approx(_least_damped_in_band(poles), rel=1e-4)
            assert trial.growing == bool(poles.real.max() > 0)


def test_all_placements_searched_together_give_what_each_search_gives():
    # the stacked search (one eigenvalue call for every placement's grid) against each
    # placement searched on its own, then its best part against eig of the MNA pencil with it
    case = combined_power_stage(odd_mode_ohm=None)
    request = request_at(_sweep(case), WIDE_HZ)
    names = [name for name, _, _ in case.ports]
    placements = [Placement(names.index(a), None if b is None else names.index(b))
                  for a, b in (("g_a", None), ("d_a", None), ("g_a", "g_b"), ("d_a", "d_b"))]
    search = _search(request, placements)
    together = search.search_all(list(range(len(placements))))
    node = {name: n for name, n, _ in case.ports}
    for m, p in enumerate(placements):
        alone = search.search(m, confirm=False)
        assert together[m] == alone, names[p.first]
        if alone.modelled and alone.trial.damping_ratio is not None:
            other = GROUND if p.second is None else node[names[p.second]]
            poles = natural_frequencies(case.circuit.with_elements(Resistor(
                "Rpart", node[names[p.first]], other, 1 / alone.trial.conductance_s)),
                case.terminations)
            assert alone.trial.damping_ratio == pytest.approx(_least_damped_in_band(poles),
                                                              rel=1e-4)


def _lumped_gains(circuit, f):
    y = port_admittance(circuit, ["in", "out"], f)
    network = skrf.Network(frequency=skrf.Frequency.from_f(f, unit="hz"), s=y2s(y, 50.0),
                           z0=50.0)
    with np.errstate(all="ignore"):
        return (10 * np.log10(np.abs(network.max_gain)),
                20 * np.log10(np.abs(network.s[:, 1, 0])))


@pytest.mark.parametrize(("case", "band"), [
    (two_stage_lna(gate_return_damping_ohm=None), (4e9, 6e9)),
    (combined_power_stage(odd_mode_ohm=None), (2.4e9, 2.6e9)),
])
def test_in_band_cost_is_the_change_of_the_lumped_two_port(case, band):
    options = CheckOptions(operating_band_hz=band)
    verdict = run_check(request_at(_sweep(case), WIDE_HZ, options=options))
    f = WIDE_HZ[(WIDE_HZ >= band[0]) & (WIDE_HZ <= band[1])]
    gain0, s21_0 = _lumped_gains(case.circuit, f)
    for hint in verdict.hints:
        gain, s21 = _lumped_gains(_with_part(case, hint), f)
        cost = hint.in_band_cost
        assert cost.points == f.size and tuple(cost.band_hz) == band
        for change, reported in ((gain - gain0, cost.max_gain_change_db),
                                 (s21 - s21_0, cost.s21_change_db)):
            assert reported == pytest.approx(change[np.argmax(np.abs(change))], abs=1e-6)
    costs = [max(abs(h.in_band_cost.max_gain_change_db), abs(h.in_band_cost.s21_change_db))
             for h in verdict.hints]
    assert costs == sorted(costs)  # with an operating band, the cheapest first


def test_with_an_operating_band_the_odd_mode_resistor_costs_nothing():
    verdict = run_check(request_at(_sweep(combined_power_stage(odd_mode_ohm=None)), WIDE_HZ,
                                   options=CheckOptions(operating_band_hz=(2.4e9, 2.6e9))))
    best = verdict.hints[0]
    assert set(best.between) in ({"d_a", "d_b"}, {"g_a", "g_b"})
    assert abs(best.in_band_cost.max_gain_change_db) < 1e-6
    assert all(abs(h.in_band_cost.max_gain_change_db) > 0.1 for h in verdict.hints[1:])


def test_hints_carry_the_contract_fields():
    body = run_check(request_at(_sweep(two_stage_lna(gate_return_damping_ohm=None)),
                                WIDE_HZ)).to_dict()
    for hint in body["hints"] + body["modes"][0]["hints"]:
        assert set(hint) >= {"between", "resistance_ohm", "achieved_damping_ratio",
                             "in_band_cost"}
        assert len(hint["between"]) == 2
    assert body["modes"][0]["symmetry"] in ("odd", "even", "single")
