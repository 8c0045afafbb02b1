"""What to sweep next when a verdict is not final: the band that would settle the open edges and
the extra points where the samples are too sparse.

* DC end open: the DC asymptote must be visible over an octave well below the lowest natural
  frequency. The lowest feature the validated model places below the band (a pole or zero with
  |s| under the band start) sets the new start at a twentieth of it; without one the band is
  taken down by a factor 100 (two decades: a resonance's 1/f tail falls below the asymptote
  test's tolerance within about a decade and a half). When NDF heads for the origin at DC, only
  0 Hz itself settles the end, and the low end is 0 ("include DC").
* Top end open: with every device's f_max declared, the largest f_max settles it on that
  statement. Otherwise the devices' share |NDF − 1| is extrapolated along its measured slope to
  where it falls to half the top limit (``TOP_TARGET_SHARE``), and an octave beyond that is asked
  for, at least ``MIN_TOP_FACTOR`` × the old top; a share that is flat or rising gives
  ``FLAT_TOP_FACTOR`` × the old top. A model zero in the right half-plane above the band asks for
  three times its frequency. Never more than ``MAX_FACTOR`` × the old band.
* Points: around each right-half-plane zero that the samples cannot pin down (σ-spaced, where its
  phase turns); inside every segment whose phase step the refinement could not resolve; beside
  every sample that a model which failed its leave-out check missed by more than the validation
  limit; around each sharp Kurokawa point that nothing explains. At most ``MAX_POINTS``.
"""

from __future__ import annotations

import math

import numpy as np

from workers.engine.check import Analysis
from workers.engine.edges import TOP_SHARE_LIMIT, EdgeJudgement
from workers.engine.models import VALIDATION_LIMIT
from workers.engine.refined_check import RefinedCheck
from workers.engine.verdict import Diagnostic, NextSweep

MAX_POINTS = 200
LOW_FACTOR = 100.0        # how far below the old start when the model shows nothing below
FEATURE_MARGIN = 20.0     # new start this far below the lowest feature the model sees below
TOP_TARGET_SHARE = 0.5 * TOP_SHARE_LIMIT
MIN_TOP_FACTOR = 4.0
FLAT_TOP_FACTOR = 10.0
MAX_FACTOR = 1000.0
MODE_OFFSETS = (-6.0, -3.0, -2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 2.0, 3.0, 6.0)  # × σ/2π
SEGMENT_POINTS = 3
KUROKAWA_SPAN = 0.02      # ± this fraction of the frequency around a Kurokawa point


def _low_end(low: EdgeJudgement, denied: bool, refined: RefinedCheck | None, f_low: float
             ) -> tuple[float, str | None]:
    if low.settled and not denied:
        return f_low, None
    if low.needs_dc:
        return 0.0, "include 0 Hz: NDF heads for the origin at DC"
    features = []
    if refined is not None and refined.model is not None:
        model = refined.model
        sizes = np.abs(np.concatenate([model.zeros_rad_s, model.poles_rad_s])) / (2 * np.pi)
        features = [float(x) for x in sizes if 0 < x < f_low]
    if features:
        start = max(min(features) / FEATURE_MARGIN, f_low / MAX_FACTOR)
        why = (f"start at {start:.3g} Hz, {FEATURE_MARGIN:g}x below the lowest feature the "
               f"model places below the band ({min(features):.3g} Hz)")
    else:
        start = f_low / LOW_FACTOR
        why = f"start at {start:.3g} Hz, {LOW_FACTOR:g}x below the band"
    return start, why


def _high_end(high: EdgeJudgement, denied: bool, refined: RefinedCheck | None,
              fmax: list[float | None], f_top: float) -> tuple[float, str | None]:
    if high.settled and not denied:
        return f_top, None
    declared = [x for x in fmax if x is not None]
    if fmax and len(declared) == len(fmax) and max(declared) > f_top:
        return max(declared), "stop at the largest declared f_max"
    slope = high.slope
    if slope is not None and math.isfinite(slope) and slope < -0.3 and high.share > 0:
        needed = f_top * (high.share / TOP_TARGET_SHARE) ** (1.0 / -slope)
        stop = max(MIN_TOP_FACTOR * f_top, 2.0 * needed)
        why = (f"stop at {stop:.3g} Hz: the devices' share falls as f^{slope:.2f} and would "
               f"reach {TOP_TARGET_SHARE:g} near {needed:.3g} Hz")
    else:
        stop = FLAT_TOP_FACTOR * f_top
        why = f"stop at {stop:.3g} Hz: the devices' share is not falling at the top"
    if refined is not None and refined.above.size:
        above = float(np.max(np.abs(refined.above))) / (2 * np.pi)
        if 3 * above > stop:
            stop = 3 * above
            why = f"stop at {stop:.3g} Hz, 3x the model's right-half-plane zero above the band"
    return min(stop, MAX_FACTOR * f_top), why


def _mode_points(refined: RefinedCheck | None) -> list[float]:
    if refined is None or refined.rhp_zeros_rad_s is None:
        return []
    points = []
    for z, pinned in zip(refined.rhp_zeros_rad_s, refined.pinned, strict=True):
        if pinned:
            continue
        centre = abs(z.imag) / (2 * np.pi)
        width = max(abs(z.real), 1e-6 * abs(z)) / (2 * np.pi)
        points += [centre + k * width for k in MODE_OFFSETS if centre + k * width > 0]
    return points


def _segment_points(analysis: Analysis, refined: RefinedCheck | None) -> list[float]:
    """Points inside the sample segments that turn faster than the limit and that the model did
    not resolve (no validated model, or a refinement that did not settle), largest first."""
    resolved = refined is not None and refined.refinement is not None \
        and refined.refinement.settled
    if resolved:
        return []
    f = analysis.request.frequency_hz[analysis.valid]
    phase = np.unwrap(np.angle(analysis.loops.ndf[analysis.valid]))
    steps = np.degrees(np.abs(np.diff(phase)))
    limit = analysis.request.options.phase_step_limit_deg
    order = [int(i) for i in np.argsort(-steps) if steps[i] > limit]
    points = []
    for i in order:
        points += list(np.linspace(f[i], f[i + 1], SEGMENT_POINTS + 2)[1:-1])
    return points


def _unvalidated_points(analysis: Analysis, refined: RefinedCheck | None) -> list[float]:
    """Points on both sides of every sample that a model which failed its leave-out check
    missed by more than the validation limit, worst first: where the samples are too sparse
    for the model to follow the response."""
    model = None if refined is None else refined.model
    if model is None or model.validated or model.misses is None:
        return []
    f = model.frequency_hz
    misses = np.where(np.isfinite(model.misses), model.misses, 0.0)
    points = []
    for i in np.argsort(-misses):
        if misses[i] <= VALIDATION_LIMIT:
            break
        for a, b in ((i - 1, i), (i, i + 1)):
            if 0 <= a and b < f.size:
                points += list(np.linspace(f[a], f[b], SEGMENT_POINTS + 2)[1:-1])
    return points


def _kurokawa_points(diagnostics: list[Diagnostic]) -> list[float]:
    points = []
    for d in diagnostics:
        if d.code == "kurokawa_unexplained" and d.severity == "blocking":
            f0 = float(d.details["frequency_hz"])
            points += list(f0 * (1 + np.linspace(-KUROKAWA_SPAN, KUROKAWA_SPAN, 5)))
    return points


def next_sweep(analysis: Analysis, refined: RefinedCheck | None,
               diagnostics: list[Diagnostic]) -> NextSweep:
    """The next sweep of a check whose verdict is not final (module docstring)."""
    f = analysis.request.frequency_hz[analysis.valid]
    f_low, f_top = float(f[0]), float(f[-1])
    codes = {d.code for d in diagnostics if d.severity == "blocking"}
    edges = analysis.ndf_edges
    reasons = []
    low, high = f_low, f_top
    if edges is not None:
        model_below = any(d.code == "band_low_open" and d.details.get("from_model")
                          for d in diagnostics)
        model_above = any(d.code == "band_high_open" and d.details.get("from_model")
                          for d in diagnostics)
        low, why_low = _low_end(edges.low, model_below, refined, f_low)
        high, why_high = _high_end(edges.high, model_above, refined,
                                   [d.fmax_hz for d in analysis.request.devices], f_top)
        if why_low:
            reasons.append(f"DC end open ({edges.low.reason}): {why_low}")
        if why_high:
            reasons.append(f"top end open ({edges.high.reason}): {why_high}")
    mode_points = _mode_points(refined)
    segment_points = _segment_points(analysis, refined) + _unvalidated_points(analysis, refined)
    kurokawa_points = _kurokawa_points(diagnostics)
    if mode_points:
        reasons.append(f"{len(mode_points) // len(MODE_OFFSETS) or 1} right-half-plane zero(s) "
                       "of the model not pinned down by the samples: points around them")
    if segment_points:
        reasons.append(f"{len(segment_points) // SEGMENT_POINTS} segment(s) where NDF turns "
                       "faster than the phase-step limit, or where the model missed the samples "
                       "it did not see, so that it could not fill in")
    if kurokawa_points:
        reasons.append("points around Kurokawa points that nothing explains")
    if not reasons:
        left = ", ".join(sorted(codes)) or "no complete count"
        reasons.append(f"the count is not complete ({left}); the same band sampled again, "
                       "more densely, may settle it")
    existing = set(analysis.request.frequency_hz.tolist())
    chosen: list[float] = []
    for x in mode_points + segment_points + kurokawa_points:
        x = float(x)
        if x > 0 and x not in existing and x not in chosen:
            chosen.append(x)
        if len(chosen) == MAX_POINTS:
            break
    return NextSweep((float(low), float(high)), sorted(chosen), "; ".join(reasons))
