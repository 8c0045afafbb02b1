"""Refinement: evaluate the validated NDF model between the samples where the count is at risk.

Suspect intervals (between neighbouring samples) are where a sampled count can go wrong: NDF
turning by more than half the phase-step limit, local minima of |NDF| near the origin, upward
sign changes of Im Y_k where Re Y_k is near or below zero (Kurokawa's condition), and K = 1 or
mu = 1 crossings of the external two-port. The model is evaluated densely there, segments that
still turn too fast are subdivided, and the clockwise encirclements are recounted on the merged
contour (samples plus model points) until no segment turns faster than half the limit, so that
the count can no longer change. Crossings of the real axis are
located by Brent's method (``scipy.optimize.brentq``) on Im NDF of the model and added to the
contour. The band edges stay the samples' own: the model is never used beyond the band, so it
cannot make an open band look closed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.optimize import brentq

from workers.engine.check import Analysis, count_trusted
from workers.engine.encirclement import Encirclements, count_encirclements
from workers.engine.identify import (
    NODE_FIT_LIMIT,
    NodeFit,
    band_rhp_zeros,
    carrying_devices,
    fit_nodes,
    identify_modes,
    near_band_rhp_zeros,
    zero_count,
)
from workers.engine.models import (
    LOCAL_LIMIT,
    MAX_TERMS,
    VALIDATION_LIMIT,
    RationalModel,
    fit_response,
)
from workers.engine.verdict import Diagnostic, MethodReport, Mode

DENSE_POINTS = 24        # model points per suspect interval in the first round
SPLIT_POINTS = 5         # model points added inside a segment that still turns too fast
MAX_ROUNDS = 8
NEAR_ORIGIN = 0.5        # |NDF| minima below this × median |NDF| are suspect
NEAR_ZERO_RE = 0.1       # Re Y_k ≤ this × |Y_k| counts as "near or below 0"
MAX_INTERVALS = 400


@dataclass(frozen=True)
class SuspectInterval:
    """A stretch between samples where the sampled count could be wrong, and why."""

    low_hz: float
    high_hz: float
    reasons: tuple[str, ...]


@dataclass(frozen=True)
class AxisCrossing:
    """NDF crossing the real axis (located by root finding on the model)."""

    frequency_hz: float
    ndf_re: float
    upward: bool  # Im NDF goes from negative to positive with rising frequency


@dataclass(frozen=True)
class Refinement:
    """The merged contour, its count and what was added."""

    frequency_hz: np.ndarray
    ndf: np.ndarray
    count: Encirclements
    count_before: int
    counts_per_round: list[int]
    points_added: int
    intervals: list[SuspectInterval]
    crossings: list[AxisCrossing] = field(default_factory=list)
    phase_target_deg: float = 22.5

    @property
    def settled(self) -> bool:
        """No segment of the merged contour turns faster than half the phase-step limit."""
        return self.count.max_phase_step_deg <= self.phase_target_deg

    def report(self, model: RationalModel) -> dict[str, Any]:
        """The ``refinement`` block of the verdict JSON."""
        return {
            "points_added": self.points_added,
            "rounds": len(self.counts_per_round),
            "count_before": self.count_before,
            "count_after": self.count.clockwise,
            "counts_per_round": list(self.counts_per_round),
            "settled": self.settled,
            "max_phase_step_deg_after": self.count.max_phase_step_deg,
            "max_phase_step_at_hz_after": self.count.max_phase_step_at_hz,
            "intervals": [{"from_hz": i.low_hz, "to_hz": i.high_hz, "reasons": list(i.reasons)}
                          for i in self.intervals],
            "real_axis_crossings": [
                {"frequency_hz": c.frequency_hz, "ndf_re": c.ndf_re,
                 "direction": "clockwise" if c.upward == (c.ndf_re < 0) else "anticlockwise"}
                for c in self.crossings],
            "model": model.summary(),
        }


def suspect_intervals(frequency_hz: np.ndarray, ndf: np.ndarray, phase_step_limit_deg: float,
                      node_frequency_hz: np.ndarray | None = None,
                      node_admittance: np.ndarray | None = None,
                      factor_frequency_hz: np.ndarray | None = None,
                      k: np.ndarray | None = None, mu: np.ndarray | None = None
                      ) -> list[SuspectInterval]:
    """Suspect intervals from the samples (module docstring), merged where they overlap."""
    f = np.asarray(frequency_hz, dtype=float)
    found: list[tuple[float, float, str]] = []
    phase = _unwrapped_phase(ndf)
    steps = np.degrees(np.abs(phase[1:] - phase[:-1]))
    for i in np.nonzero(steps > 0.5 * phase_step_limit_deg)[0]:
        found.append((f[i], f[i + 1], "phase_step"))
    magnitude = np.abs(ndf)
    if magnitude.size >= 3:
        floor = NEAR_ORIGIN * _median(magnitude)
        inner = np.arange(1, magnitude.size - 1)
        minima = inner[(magnitude[inner] <= magnitude[inner - 1])
                       & (magnitude[inner] <= magnitude[inner + 1])
                       & (magnitude[inner] < floor)]
        for i in minima:
            found.append((f[i - 1], f[i + 1], "ndf_minimum"))
    if node_admittance is not None and node_frequency_hz is not None:
        y = node_admittance
        fn = np.asarray(node_frequency_hz, dtype=float)
        finite = np.isfinite(y)
        with np.errstate(invalid="ignore"):
            im = np.where(finite, y.imag, np.nan)
            near = finite & (y.real <= NEAR_ZERO_RE * np.abs(y))
            rising = (im[:-1] < 0) & (im[1:] >= 0) & (near[:-1] | near[1:])
        for i in np.nonzero(rising.any(axis=1))[0]:
            found.append((fn[i], fn[i + 1], "kurokawa_sign_change"))
    if factor_frequency_hz is not None:
        ff = np.asarray(factor_frequency_hz, dtype=float)
        for name, values in (("k_crossing", k), ("mu_crossing", mu)):
            if values is None:
                continue
            d = np.asarray(values, dtype=float) - 1.0
            with np.errstate(invalid="ignore"):
                change = np.nonzero(np.sign(d[:-1]) * np.sign(d[1:]) < 0)[0]
            for i in change:
                found.append((ff[i], ff[i + 1], name))
    return _merge(found)


def _median(values: np.ndarray) -> float:
    """``np.median`` of a 1-D float array (the middle value, or the mean of the middle two; NaN
    if any value is NaN), without its generic reduction machinery."""
    ordered = np.sort(values)
    n = ordered.size
    if n == 0 or np.isnan(ordered[-1]):
        return float("nan")
    return float(ordered[n // 2]) if n % 2 else float((ordered[n // 2 - 1] + ordered[n // 2]) / 2)


def _merge(found: list[tuple[float, float, str]]) -> list[SuspectInterval]:
    merged: list[list[Any]] = []
    for low, high, reason in sorted(found):
        if merged and low <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], high)
            merged[-1][2].add(reason)
        else:
            merged.append([low, high, {reason}])
    if len(merged) > MAX_INTERVALS:  # keep the widest-ranging set bounded: join neighbours
        step = int(np.ceil(len(merged) / MAX_INTERVALS))
        merged = [[group[0][0], group[-1][1], set().union(*(g[2] for g in group))]
                  for group in (merged[i:i + step] for i in range(0, len(merged), step))]
    return [SuspectInterval(float(lo), float(hi), tuple(sorted(r))) for lo, hi, r in merged]


def _unwrapped_phase(h: np.ndarray) -> np.ndarray:
    """``np.unwrap(np.angle(h))`` for a 1-D array, written out (numpy's steps, same values) to
    save its generic bookkeeping on the refinement's short arrays."""
    phase = np.arctan2(h.imag, h.real)  # np.angle
    if phase.size < 2:
        return phase
    step = phase[1:] - phase[:-1]
    if not (np.abs(step) >= np.pi).any():  # no jump to undo: every correction is +0.0
        phase[1:] += 0.0
        return phase
    wrapped = np.mod(step + np.pi, 2 * np.pi) - np.pi
    wrapped[(wrapped == -np.pi) & (step > 0)] = np.pi
    correction = wrapped - step
    correction[np.abs(step) < np.pi] = 0
    phase[1:] += np.cumsum(correction)
    return phase


def _interior(low: np.ndarray, high: np.ndarray, n: int) -> np.ndarray:
    """n evenly spaced points strictly inside each interval (low_i, high_i), interval by
    interval: ``np.linspace(low_i, high_i, n + 2)[1:-1]`` for all i at once (same values)."""
    low = np.asarray(low, dtype=float)
    step = (np.asarray(high, dtype=float) - low) / (n + 1)
    if np.any(step == 0):  # linspace's own path for empty intervals
        return np.concatenate([np.linspace(a, b, n + 2)[1:-1] for a, b in zip(low, high,
                                                                               strict=True)])
    return (np.arange(1, n + 1, dtype=float)[None, :] * step[:, None] + low[:, None]).ravel()


def _real_axis_crossings(model: RationalModel, f: np.ndarray, h: np.ndarray
                         ) -> tuple[list[AxisCrossing], list[complex]]:
    """Roots of Im NDF(model) inside every segment of the contour where Im changes sign, and
    the model's value at each (evaluated one root at a time)."""
    found, values = [], []
    change = np.nonzero(np.sign(h.imag[:-1]) * np.sign(h.imag[1:]) < 0)[0]
    im = model.im_on_axis_unguarded
    for i in change:
        low, high = float(f[i]), float(f[i + 1])
        with np.errstate(all="ignore"):  # as im_on_axis
            at_low, at_high = im(low), im(high)
            if not (math.isfinite(at_low) and math.isfinite(at_high)) or at_low * at_high > 0:
                continue
            root = low if at_low == 0 else high if at_high == 0 else \
                brentq(im, low, high, xtol=1e-12 * high, rtol=1e-12)
        value = model(np.array([root]))[0]
        found.append(AxisCrossing(float(root), float(value.real), at_low < 0))
        values.append(value)
    return found, values


def refine_contour(frequency_hz: np.ndarray, ndf: np.ndarray, model: RationalModel,
                   intervals: list[SuspectInterval], phase_step_limit_deg: float,
                   count_before: int | None = None) -> Refinement:
    """Merge model points into the sampled contour and recount (module docstring)."""
    f = np.asarray(frequency_hz, dtype=float)
    h = np.asarray(ndf, dtype=complex)
    before = count_encirclements(f, h).clockwise if count_before is None else count_before
    new = _interior(np.array([i.low_hz for i in intervals]),
                    np.array([i.high_hz for i in intervals]), DENSE_POINTS) \
        if intervals else np.zeros(0)
    counts: list[int] = []
    added = 0
    target = 0.5 * phase_step_limit_deg
    for _ in range(MAX_ROUNDS):
        if new.size:
            values = model(new)
            keep = np.isfinite(values) & (np.abs(values) > 0)
            f = np.concatenate([f, new[keep]])
            h = np.concatenate([h, values[keep]])
            order = np.argsort(f, kind="stable")
            f, h = f[order], h[order]
            added += int(keep.sum())
        phase = _unwrapped_phase(h)
        # Python's round() rounds half to even, as np.round does
        counts.append(-(round(float(phase[-1]) / math.pi) - round(float(phase[0]) / math.pi)))
        fast = np.nonzero(np.degrees(np.abs(phase[1:] - phase[:-1])) > target)[0]
        if fast.size == 0:
            break  # nothing turns too fast any more: further points cannot change the count
        new = _interior(f[fast], f[fast + 1], SPLIT_POINTS)
    crossings, at_crossings = _real_axis_crossings(model, f, h) if added else ([], [])
    if crossings:
        at = np.array([c.frequency_hz for c in crossings])
        # one crossing: the value already found is this same evaluation (several are evaluated
        # together, which sums in another order)
        values = np.array(at_crossings) if len(crossings) == 1 else model(at)
        f = np.concatenate([f, at])
        h = np.concatenate([h, values])
        order = np.argsort(f, kind="stable")
        f, h = f[order], h[order]
        added += at.size
    count = count_encirclements(f, h, _unwrapped_phase(h))
    return Refinement(f, h, count, before, counts, added, intervals, crossings, target)


@dataclass(frozen=True)
class RefinedCheck:
    """What the model adds to one check: the refined count, the model's zeros and modes."""

    model: RationalModel | None
    refinement: Refinement | None
    rhp_zeros_rad_s: np.ndarray | None   # in-band right-half-plane zeros (Im ≥ 0); None: unused
    model_count: int | None
    modes: list[Mode]
    diagnostics: list[Diagnostic]
    method: MethodReport
    report: dict[str, Any] | None

    @property
    def zeros_rad_s(self) -> np.ndarray | None:
        """Every confirmed model zero (both half-planes) when the zeros are trusted."""
        return None if self.rhp_zeros_rad_s is None or self.model is None \
            else self.model.zeros_rad_s


def _not_used(diagnostics: list[Diagnostic], note: str, model: RationalModel | None = None
              ) -> RefinedCheck:
    report = {"points_added": 0, "model": model.summary()} if model is not None else None
    return RefinedCheck(model, None, None, None, [], diagnostics,
                        MethodReport("rational_model", None, None, note), report)


def refine_analysis(analysis: Analysis, factors: tuple[np.ndarray, Any] | None = None
                    ) -> RefinedCheck:
    """Fit the NDF model, refine the contour, identify the unstable natural frequencies.

    ``factors``: (frequencies, TwoPortFactors) of the external two-port, for K and mu crossings.
    """
    request = analysis.request
    valid = analysis.valid
    f = request.frequency_hz[valid]
    h = analysis.loops.ndf[valid]
    diagnostics: list[Diagnostic] = []
    if f.size < 8 or f[-1] <= 0:
        diagnostics.append(Diagnostic(
            "model_not_validated", "warning",
            f"only {f.size} frequencies have a defined NDF; no rational model was fitted"))
        return _not_used(diagnostics, "too few samples for a rational model")
    try:
        model = fit_response(f, h)
    except (ValueError, np.linalg.LinAlgError) as exc:
        diagnostics.append(Diagnostic(
            "model_not_validated", "warning",
            f"no rational model of NDF could be fitted ({exc}); the count rests on the samples"))
        return _not_used(diagnostics, "model fit failed")
    delayed = [d.name for d in request.devices if d.delay_s > 0]
    if not model.validated:
        sampled = None if analysis.ndf_count is None else analysis.ndf_count.clockwise
        diagnostics.append(Diagnostic(
            "model_not_validated", "blocking",
            "the rational model of NDF failed its leave-out check (error "
            f"{model.leave_out_error:.3g} of max|NDF|, {model.local_error:.3g} of |NDF| at worst; "
            f"limits {VALIDATION_LIMIT:g} and {LOCAL_LIMIT:g}), so the sampled count "
            f"({sampled}) has no second method to agree with it",
            {**model.summary(), "encirclement_count": sampled, "model_count": None}))
        diagnostics.append(Diagnostic(
            "not_rational", "warning",
            f"NDF does not follow a rational function of order <= {MAX_TERMS} over the band "
            "(a delay in gm, noise or too few samples per feature)"
            + (f"; devices with delay: {', '.join(delayed)}" if delayed else "")
            + "; the model is not trusted", {"terms": model.terms, "delayed_devices": delayed}))
        return _not_used(diagnostics, "model did not validate", model)
    two_port_f, k, mu = None, None, None
    if factors is not None:
        two_port_f, table = factors
        k, mu = table.k, table.mu
    intervals = suspect_intervals(
        f, h, request.options.phase_step_limit_deg, request.frequency_hz,
        analysis.nodes.admittance, two_port_f, k, mu)
    refinement = refine_contour(
        f, h, model, intervals, request.options.phase_step_limit_deg,
        None if analysis.ndf_count is None else analysis.ndf_count.clockwise)
    report = refinement.report(model)
    if refinement.points_added:
        diagnostics.append(Diagnostic(
            "refinement_added_points", "info",
            f"the validated NDF model added {refinement.points_added} points in "
            f"{len(intervals)} suspect intervals (leave-out error {model.leave_out_error:.2g}); "
            f"count {refinement.count_before} on the samples, {refinement.count.clockwise} "
            "refined", {"points_added": refinement.points_added,
                        "intervals": len(intervals)}))
    if delayed:
        diagnostics.append(Diagnostic(
            "not_rational", "warning",
            f"devices {', '.join(delayed)} carry a delay, so NDF is not rational: the model "
            "interpolates between samples (leave-out checked) but its zeros are not taken as "
            "natural frequencies", {"delayed_devices": delayed}))
        return RefinedCheck(model, refinement, None, None, [], diagnostics,
                            MethodReport("rational_model", None, None,
                                         "delay in gm: model used between samples only"), report)
    zeros = band_rhp_zeros(model, float(f[0]), float(f[-1]))
    count = zero_count(zeros)
    below, above = near_band_rhp_zeros(model, float(f[0]), float(f[-1]))
    for code, where, outside in (("band_low_open", "below", below),
                                 ("band_high_open", "above", above)):
        if outside.size:
            z = outside[0]
            diagnostics.append(Diagnostic(
                code, "blocking",
                f"the validated NDF model has a right-half-plane zero {where} the band "
                f"(σ = {z.real:.4g} 1/s at {abs(z.imag) / (2 * np.pi):.6g} Hz); the model is not "
                f"trusted outside the band, so extend the band {where} to settle it",
                {"growth_rate_per_s": float(z.real),
                 "frequency_hz": float(abs(z.imag) / (2 * np.pi)), "from_model": True}))
    report["model_unstable_count"] = count
    report["rhp_zeros"] = [{"growth_rate_per_s": float(z.real),
                            "frequency_hz": float(abs(z.imag) / (2 * np.pi))} for z in zeros]
    modes: list[Mode] = []
    node_fit = None
    if zeros.size or analysis.nodes.crossings:
        poles = model.zeros_rad_s[np.abs(model.zeros_rad_s) <= 4 * model.scale_rad_s]
        node_fit = fit_nodes(request.frequency_hz, analysis.nodes.impedance, poles,
                             model.scale_rad_s)
        report["kurokawa_refined"] = refined_kurokawa(analysis, node_fit)
    if zeros.size and node_fit is not None:
        modes, node_error = _modes(analysis, model, zeros, node_fit)
        report["node_fit_error"] = node_error
        weak = {name: e for name, e in node_error.items() if not e <= NODE_FIT_LIMIT}
        if weak:
            diagnostics.append(Diagnostic(
                "model_not_validated", "info",
                "the partial-fraction fit of Z_kk at some nodes is loose, so their participation "
                "is approximate", {"node_fit_error": weak}))
    note = f"{count} right-half-plane zero(s) of the validated NDF model inside the band"
    return RefinedCheck(model, refinement, zeros, count, modes, diagnostics,
                        MethodReport("rational_model", count, None, note), report)


def _modes(analysis: Analysis, model: RationalModel, zeros: np.ndarray, node_fit: NodeFit
           ) -> tuple[list[Mode], dict[str, float]]:
    request = analysis.request
    names = [p.name for p in request.ports]
    valid = analysis.valid
    carriers = _single_carrier(analysis, zero_count(zeros), zeros.size)
    if carriers is None:
        carriers = carrying_devices(request.frequency_hz[valid],
                                    analysis.loops.return_difference[valid], zeros,
                                    model.noise_floor)
    modes = identify_modes(zeros, node_fit, names, [d.name for d in request.devices], carriers)
    return modes, {n: float(e) for n, e in zip(names, node_fit.error, strict=True)}


def _single_carrier(analysis: Analysis, count: int, n_modes: int) -> list[list[int]] | None:
    """Every mode to one device when the samples already say so unambiguously: each F_k count
    is trusted, they add up to the model's count, and only one device's count is positive."""
    counts = analysis.device_counts
    if not counts or any(c is None or count_trusted(c, analysis.request) for c in counts):
        return None
    clockwise = [c.clockwise for c in counts if c is not None]
    positive = [k for k, n in enumerate(clockwise) if n > 0]
    if sum(clockwise) != count or len(positive) != 1:
        return None
    return [[positive[0]] for _ in range(n_modes)]


def refined_kurokawa(analysis: Analysis, node_fit: NodeFit) -> list[dict[str, Any]]:
    """Each sampled Kurokawa point located again by Brent's method on Im Y_k = Im 1/Z_kk of the
    node's partial-fraction model, between the two samples that bracket it (nodes whose model
    fits within NODE_FIT_LIMIT only)."""
    f = analysis.request.frequency_hz
    found = []
    for c in analysis.nodes.crossings:
        if not node_fit.error[c.node] <= NODE_FIT_LIMIT:
            continue
        i = min(max(int(np.searchsorted(f, c.frequency_hz)) - 1, 0), f.size - 2)

        def im_admittance(x: float, node: int = c.node) -> float:
            z = node_fit.impedance_at(x, node)
            return float((1.0 / z).imag) if z != 0 else float("nan")

        low, high = float(f[i]), float(f[i + 1])
        with np.errstate(all="ignore"):  # impedance_at leaves overflow to its caller
            ends = im_admittance(low), im_admittance(high)
            if not (math.isfinite(ends[0]) and math.isfinite(ends[1]) and ends[0] < 0 <= ends[1]):
                continue
            root = brentq(im_admittance, low, high, xtol=1e-12 * high, rtol=1e-12)
        with np.errstate(divide="ignore", invalid="ignore"):
            y = 1.0 / node_fit.impedance(np.array([2j * np.pi * root]))[0, c.node]
        found.append({"node": analysis.request.ports[c.node].name, "frequency_hz": float(root),
                      "re_admittance_s": float(y.real),
                      "sampled_frequency_hz": c.frequency_hz,
                      "sampled_re_admittance_s": c.re_admittance_s})
    return found
