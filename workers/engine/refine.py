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

from workers.engine.encirclement import Encirclements, count_encirclements
from workers.engine.models import RationalModel
from workers.engine.refine_report import CrossingReport, IntervalReport, RefinementReport

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

    def report(self, model: RationalModel) -> RefinementReport:
        """The ``refinement`` block of the verdict (the model's zeros are added by the caller)."""
        return RefinementReport(
            model=model.summary(),
            points_added=self.points_added,
            rounds=len(self.counts_per_round),
            count_before=self.count_before,
            count_after=self.count.clockwise,
            counts_per_round=list(self.counts_per_round),
            settled=self.settled,
            max_phase_step_deg_after=self.count.max_phase_step_deg,
            max_phase_step_at_hz_after=self.count.max_phase_step_at_hz,
            intervals=[IntervalReport(i.low_hz, i.high_hz, list(i.reasons))
                       for i in self.intervals],
            real_axis_crossings=[
                CrossingReport(c.frequency_hz, c.ndf_re,
                               "clockwise" if c.upward == (c.ndf_re < 0) else "anticlockwise")
                for c in self.crossings],
        )


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
        floor = NEAR_ORIGIN * float(np.median(magnitude))
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
                # a sign change, a sample exactly at 1 included (it ends one interval)
                change = np.nonzero(((d[:-1] < 0) & (d[1:] >= 0))
                                    | ((d[:-1] > 0) & (d[1:] <= 0)))[0]
            for i in change:
                found.append((ff[i], ff[i + 1], name))
    return _merge(found)


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
    return np.unwrap(np.angle(h))


def _interior(low: np.ndarray, high: np.ndarray, n: int) -> np.ndarray:
    """n evenly spaced points strictly inside each interval (low_i, high_i), interval by
    interval."""
    return np.linspace(low, high, n + 2, axis=1)[:, 1:-1].ravel()


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
                   count_before: int | None = None,
                   closures: tuple[float | None, float | None] = (None, None)) -> Refinement:
    """Merge model points into the sampled contour and recount (module docstring).

    ``closures``: the (DC, top) closing phase changes of the samples' settled edges
    (``workers.engine.check.BandEdges.closures``); the edges are the samples' own, so the same
    closures serve the refined contour."""
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
        counts.append(count_encirclements(f, h, phase, *closures).clockwise)
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
    count = count_encirclements(f, h, _unwrapped_phase(h), *closures)
    return Refinement(f, h, count, before, counts, added, intervals, crossings, target)
