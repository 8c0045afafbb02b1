"""What a designer acts on, added to a decided verdict: the margin, each mode's symmetry, and
stabilisers computed on the data (``stabilisers``) for every unstable mode and for a stable
check whose least-damped pair is below ``options.target_damping_ratio``.

Placements tried: each probe node to ground (at most ``MAX_SHUNTS``, those where a part moves
the modes most, by the diagonal residue ``node_leverage``) and each pair of probe nodes a mode
drives in opposite phase (``symmetry.opposed_pairs``, at most ``MAX_PAIRS`` per mode); with a
validated model, only placements whose φ the model's poles fit (``stabilisers``). A part is
judged on the whole circuit: the count with it must be 0 and the least-damped ζ in the band at
least the target. The verdict's ``hints`` are the best three placements over all; each mode's
``hints`` the best three of the ground shunts and its own opposed pairs, and its ``hint`` the
first of those. Best: meeting the target first, then (with ``options.operating_band_hz``) the
smallest change of MSG/MAG and |S21| in that band, then the smallest conductance (least loading);
without a placement that meets it, the lowest count and then the highest ζ, kept only where it
improves on the circuit as it is.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from workers.engine.advice_report import InBandCost, Stabiliser
from workers.engine.band_cost import OperatingBandCost
from workers.engine.check import Analysis
from workers.engine.identify import NodeFit
from workers.engine.margin import PlacedFrequency, least_damped, node_model, place, stability_margin
from workers.engine.refined_check import RefinedCheck
from workers.engine.stabilisers import Found, Placement, StabiliserSearch
from workers.engine.symmetry import opposed_pairs
from workers.engine.verdict import CheckVerdict, Mode, StabilisationHint

MAX_SHUNTS = 6
MAX_PAIRS = 3
LEVERAGE_SHARE = 0.1   # shunts only at nodes with this share of the largest leverage
HINTS = 3
SAME_ZERO = 1e-9    # a mode and a margin entry this close (relative) are the same zero
IMPROVEMENT = 1e-3  # a part that does not meet the target must raise the least ζ by this


def _mode_shapes(analysis: Analysis, node_fit: NodeFit | None, modes: list[Mode],
                 placed: list[PlacedFrequency]) -> list[PlacedFrequency | None]:
    """Each model-identified mode placed (reusing the margin's placement of the same zero)."""
    found: list[PlacedFrequency | None] = []
    for mode in modes:
        if node_fit is None or mode.estimated_by != "rational_model" or \
                mode.growth_rate_per_s is None:
            found.append(None)
            continue
        zero = complex(mode.growth_rate_per_s, 2 * np.pi * mode.frequency_hz)
        same = [p for p in placed if abs(p.zero - zero) <= SAME_ZERO * abs(zero)]
        found.append(same[0] if same else place(analysis, node_fit, [zero])[0])
    return found


def _shunt_nodes(analysis: Analysis, targets: list[PlacedFrequency | None],
                 modes: list[Mode]) -> list[int]:
    """Probe nodes ranked by the largest leverage any target has there (|R_kk| is the first-order
    move of the natural frequency per siemens of shunt, ∂s/∂G = −R_kk), without those below
    ``LEVERAGE_SHARE`` of the largest (they need that much more conductance for the same move);
    by the modes' node order when no shape is known."""
    names = [p.name for p in analysis.request.ports]
    probes = [k for k, p in enumerate(analysis.request.ports) if p.role == "probe"]
    weight = dict.fromkeys(probes, 0.0)
    for target in targets:
        if target is not None:
            for k in probes:
                weight[k] = max(weight[k], float(target.shape.leverage[k]))
    for mode in modes:
        for rank, name in enumerate(mode.nodes):
            k = names.index(name)
            if k in weight:
                weight[k] = max(weight[k], 1e-9 / (1 + rank))
    top = max(weight.values(), default=0.0)
    ranked = sorted(probes, key=lambda k: -weight[k])
    return [k for k in ranked if weight[k] >= LEVERAGE_SHARE * top][:MAX_SHUNTS]


def _cost_size(cost: InBandCost | None) -> float:
    if cost is None:
        return 0.0
    return max(abs(cost.max_gain_change_db or 0.0), abs(cost.s21_change_db or 0.0))


class _Candidates:
    """The searched placements of one check, confirmed (their count made) only when a ranking
    reaches them: the count is the dearest step, and most placements are never shown."""

    def __init__(self, analysis: Analysis, search: StabiliserSearch,
                 costs: OperatingBandCost | None, count_before: int,
                 zeta_before: float | None) -> None:
        self.analysis, self.search, self.costs = analysis, search, costs
        self.count_before, self.zeta_before = count_before, zeta_before
        kept = [m for m in range(len(search.placements))
                if search.fit is None or search.fitted(m)]
        self.found = {search.placements[m]: found
                      for m, found in zip(kept, search.search_all(kept), strict=True)}
        self._records: dict[Placement, Stabiliser] = {}

    def _cost(self, found: Found) -> InBandCost | None:
        if self.costs is None:
            return None
        return self.costs.cost(found.placement.vector(self.analysis.request.n_ports),
                               found.trial.conductance_s)

    def record(self, placement: Placement) -> Stabiliser:
        if placement not in self._records:
            found = self.search.confirmed(self.found[placement])
            names = [p.name for p in self.analysis.request.ports]
            t = found.trial
            self._records[placement] = Stabiliser(
                between=[names[placement.first],
                         None if placement.second is None else names[placement.second]],
                resistance_ohm=1.0 / t.conductance_s, conductance_s=t.conductance_s,
                achieved_damping_ratio=t.damping_ratio if found.modelled else None,
                meets_target=found.meets_target,
                unstable_count_after=-1 if t.count is None else int(t.count),
                least_damped_hz=t.least_damped_hz if found.modelled else None,
                in_band_cost=self._cost(found))
        return self._records[placement]

    def best(self, placements: list[Placement]) -> list[Stabiliser]:
        """The best ``HINTS`` of ``placements`` (module docstring)."""
        chosen = [p for p in dict.fromkeys(placements) if p in self.found]
        meeting = sorted((p for p in chosen if self.found[p].meets_target),
                         key=lambda p: (_cost_size(self._cost(self.found[p])),
                                        self.found[p].trial.conductance_s))
        kept = []
        for p in meeting:
            record = self.record(p)
            if record.meets_target:
                kept.append(record)
            if len(kept) == HINTS:
                break
        if kept:
            return sorted(kept, key=lambda s: (_cost_size(s.in_band_cost), s.conductance_s))

        def provisional(p: Placement) -> tuple:
            t = self.found[p].trial
            return (t.growing, -(t.damping_ratio if t.damping_ratio is not None else -np.inf),
                    t.conductance_s)

        better = []
        for p in sorted(chosen, key=provisional):
            record = self.record(p)
            if self._improves(record):
                better.append(record)
            if len(better) == HINTS:
                break
        return sorted(better, key=lambda s: (s.unstable_count_after,
                                             -(s.achieved_damping_ratio or -np.inf),
                                             s.conductance_s))

    def _improves(self, s: Stabiliser) -> bool:
        if 0 <= s.unstable_count_after < self.count_before:
            return True
        return (s.unstable_count_after == self.count_before
                and s.achieved_damping_ratio is not None and self.zeta_before is not None
                and s.achieved_damping_ratio > self.zeta_before + IMPROVEMENT)


def _mode_hint(mode: Mode, best: Stabiliser, target: float) -> StabilisationHint:
    note = (f"smallest conductance here found on the data to bring the count to 0 and the "
            f"least-damped ζ to {target:g} (count exact on the samples, ζ from the validated "
            "model); re-check the circuit with the real part" if best.meets_target else
            "the best this placement does on the data (it does not reach the target damping); "
            "re-check the circuit with the real part")
    return StabilisationHint(best.between[0] or "", mode.frequency_hz, best.conductance_s,
                             best.resistance_ohm, note, list(best.between))


def advise(verdict: CheckVerdict, analysis: Analysis, refined: RefinedCheck | None
           ) -> CheckVerdict:
    """``verdict`` with ``margin``, ``hints`` and each mode's ``symmetry`` and ``hints``."""
    options = analysis.request.options
    node_fit = node_model(analysis, refined)
    placed = least_damped(analysis, refined, node_fit)
    margin = stability_margin(analysis, refined, placed)
    modes = list(verdict.modes)
    shapes = _mode_shapes(analysis, node_fit, modes, placed)
    mode_zeros = [complex(m.growth_rate_per_s or 0.0, 2 * np.pi * m.frequency_hz) for m in modes]
    weak = [p for p in placed if p.damping_ratio < options.target_damping_ratio
            and not any(abs(p.zero - z) <= SAME_ZERO * abs(p.zero) for z in mode_zeros)]
    modes = [replace(m, symmetry=s.record.symmetry if s else None)
             for m, s in zip(modes, shapes, strict=True)]
    targets: list[PlacedFrequency | None] = [*shapes, *weak]
    probes = [k for k, p in enumerate(analysis.request.ports) if p.role == "probe"]
    shunts = [Placement(k, None) for k in _shunt_nodes(analysis, targets, modes)]
    own_pairs = [[Placement(i, j) for i, j in opposed_pairs(t.shape.phasor, probes, MAX_PAIRS)]
                 if t is not None and t.shape.phasor is not None else [] for t in targets]
    placements = list(dict.fromkeys([*shunts, *(p for pairs in own_pairs for p in pairs)]))
    if analysis.ndf_count is None or not (modes or weak) or not placements:
        return replace(verdict, margin=margin, modes=modes)
    search = StabiliserSearch(analysis, node_fit, options.target_damping_ratio, placements)
    costs = OperatingBandCost(analysis, options.operating_band_hz) \
        if options.operating_band_hz is not None else None
    candidates = _Candidates(analysis, search, costs, analysis.ndf_count.clockwise,
                             placed[0].damping_ratio if placed else None)
    hints = candidates.best(placements)
    advised = []
    for mode, pairs in zip(modes, own_pairs, strict=False):
        own = candidates.best([*shunts, *pairs])
        advised.append(replace(
            mode, hints=own,
            hint=_mode_hint(mode, own[0], options.target_damping_ratio) if own else mode.hint))
    return replace(verdict, margin=margin, hints=hints, modes=advised)
