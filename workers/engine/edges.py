"""Band edges judged by their physics: may the sampled band stand for the whole jω axis?

The encirclement count needs arg NDF over ω ∈ [0, ∞) (``encirclement``); the samples give it on
[f_low, f_top] only. Each edge is *settled* when the stretch beyond it is known well enough to
close the contour there, and the closing phase change is then part of the count.

**DC end.** NDF is real at ω = 0 (conjugate symmetry) but need not be 1: bias loops act at DC.
Near DC an analytic NDF(jω) = N₀ + jN₁ω − N₂ω² − jN₃ω³ + … (real Nₖ), so on its low-frequency
asymptote Im NDF shrinks in proportion to f and Re NDF flattens towards the real N₀. The edge is
settled when the band includes 0 Hz, or when over at least the lowest octave of the data
(and at least ``MIN_EDGE_SAMPLES`` samples) Im NDF / f and Re NDF each stay within
``DC_SHAPE_TOLERANCE`` of their values at the lowest sample and N₀ is not near 0. The stretch
[0, f_low] is then closed along the asymptote, a nearly vertical segment from N₀ to NDF(f_low)
that cannot pass the origin: its phase change is arg(NDF(f_low) / N₀).
*Assumes* that no natural frequency below the band shows in the lowest octave by less than the
tolerance. An NDF whose magnitude shrinks towards DC (as √f or faster: a zero at or near 0 Hz)
has no non-zero DC value to close on: only a sample at 0 Hz settles that end. A resonance below
the band leaves a tail ∝ 1/f in Im NDF (and ∝ 1/f² in Re NDF), the
opposite trend, so a band that starts near or above one fails the test. A small |NDF − 1| or a
share that falls towards DC is not evidence of anything here.

**Top end.** Every physical device's gain rolls off: shunted by its capacitance, a
transconductance gives a return ratio ∝ 1/f, so the devices' share |NDF − 1| dies away. The
edge is settled when the share at the top sample is at most ``TOP_SHARE_LIMIT`` and falls over
the top octave (and over its upper half) at least as fast as 1/f: fitted slope of
ln|NDF − 1| against ln f at most −(1 − ``TOP_SLOPE_TOLERANCE``). A turn around the origin needs
|NDF − 1| ≥ 1 (NDF = 0 is at distance 1 from 1), so a share below 1 that keeps falling confines
NDF beyond the band to the disc |NDF − 1| < 1, where arg NDF returns to 0 without a turn: the
closing phase change is −arg NDF(f_top). *Assumes* nothing above the band lifts the share from
its falling trend back to 1. A flat or rising share is open.

**Declared f_max.** A device without power gain (Mason's unilateral gain U < 1) cannot sustain an
oscillation (common practice). When every device declares ``fmax_hz`` and the band reaches the
largest, the top edge is settled on that statement (reported as an assumption) and closed the
shortest way back to the positive real axis, unless NDF there lies so near the negative real
axis (``AMBIGUOUS_CLOSURE_DEG``) that the direction of that way is not clear.

Everything the rules cannot see is open.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

EdgeBasis = Literal["includes_dc", "dc_asymptote", "share_decay", "negligible_share",
                    "fmax_statement", "open"]

MIN_EDGE_SAMPLES = 4          # samples an edge test uses at least (beyond the octave if needed)
DC_SHAPE_TOLERANCE = 0.02     # relative spread of Im NDF/f and of Re NDF over the lowest octave
DC_REAL_FLOOR = 1e-9          # |Im NDF| below this × |NDF| everywhere there: NDF is real
DC_ZERO_LIMIT = 1e-6          # |N₀| below this (relative to max |NDF| there): a zero at DC
DC_ORIGIN_SLOPE = 0.5         # |NDF| shrinking towards DC at least as f^this: it heads for 0
TOP_SHARE_LIMIT = 0.5         # largest |NDF − 1| at the top sample of a settled top edge
TOP_SLOPE_TOLERANCE = 0.1     # the share must fall at least as fast as f^−(1 − this)
NEGLIGIBLE_SHARE = 1e-8       # |NDF − 1| below this at the top: the devices are gone
AMBIGUOUS_CLOSURE_DEG = 150.0  # |arg NDF(f_top)| beyond this: no shortest way back is clear


@dataclass(frozen=True)
class EdgeJudgement:
    """Whether one band edge is settled, on what basis, and the phase that closes it.

    ``closure_rad``: the change of arg NDF from the edge's asymptote (DC value or ∞) to the edge
    sample (DC end) or from the edge sample to ∞ (top end), along the path the rule assumes;
    0 when open. ``share``: |NDF − 1| at the edge sample. ``spread``: at the DC end, the larger
    relative spread of Im NDF / f and of Re NDF over the window. ``slope``: at the top, the
    fitted d ln|NDF − 1| / d ln f over the window. ``span_hz``: the samples the test used.
    ``reason``: one sentence for the diagnostics.
    """

    side: Literal["low", "high"]
    settled: bool
    basis: EdgeBasis
    closure_rad: float
    frequency_hz: float
    share: float
    slope: float | None
    span_hz: tuple[float, float]
    reason: str
    spread: float | None = None
    dc_value: float | None = None  # N₀ estimated at the DC end
    needs_dc: bool = False         # only a sample at 0 Hz can settle this DC end


def _edge_window(f: np.ndarray, low: bool) -> np.ndarray:
    """Indices of the lowest (highest) octave — up to the first sample at or beyond twice (half)
    the edge frequency — widened to MIN_EDGE_SAMPLES samples."""
    n = f.size
    if low:
        count = min(n, int(np.searchsorted(f, 2.0 * f[0], side="left")) + 1)
        return np.arange(min(n, max(count, MIN_EDGE_SAMPLES)))
    first = max(0, int(np.searchsorted(f, 0.5 * f[-1], side="right")) - 1)
    return np.arange(min(first, n - MIN_EDGE_SAMPLES) if n >= MIN_EDGE_SAMPLES else 0, n)


def judge_low_edge(frequency_hz: np.ndarray, h: np.ndarray) -> EdgeJudgement:
    """The DC end (module docstring). ``h`` finite at every sample, frequencies increasing."""
    f = np.asarray(frequency_hz, dtype=float)
    h = np.asarray(h, dtype=complex)
    share = float(abs(h[0] - 1.0))
    if f[0] <= 0.0:
        value = complex(h[0])
        return EdgeJudgement("low", True, "includes_dc", 0.0, 0.0, share, None, (0.0, 0.0),
                             "the band includes 0 Hz", None, float(value.real))
    window = _edge_window(f, low=True)
    fw, hw = f[window], h[window]
    span = (float(fw[0]), float(fw[-1]))
    level = float(np.max(np.abs(hw)))
    n0 = float(hw[0].real)
    im_ratio = hw.imag / fw
    if np.all(np.abs(hw.imag) <= DC_REAL_FLOOR * np.abs(hw)):
        im_spread = 0.0
    else:
        reference = abs(im_ratio[0]) if im_ratio[0] != 0 else float(np.max(np.abs(im_ratio)))
        im_spread = float(np.max(np.abs(im_ratio - im_ratio[0])) / reference)
    re_spread = float(np.max(np.abs(hw.real - n0)) / abs(n0)) if n0 != 0 else math.inf
    spread = max(im_spread, re_spread)
    octave = span[1] >= 2.0 * span[0] * (1 - 1e-9)
    magnitude_slope = float(np.polyfit(np.log(fw), np.log(np.abs(hw)), 1)[0]) \
        if np.all(np.abs(hw) > 0) else math.inf
    if abs(n0) <= DC_ZERO_LIMIT * level or magnitude_slope >= DC_ORIGIN_SLOPE:
        reason = (f"|NDF| shrinks towards DC as f^{magnitude_slope:.2f} over {span[0]:.6g}–"
                  f"{span[1]:.6g} Hz (Re NDF {n0:.3g} at the lowest sample): NDF heads for the "
                  "origin at DC (a natural frequency at or near 0 Hz); sample down to 0 Hz")
        return EdgeJudgement("low", False, "open", 0.0, span[0], share, None, span, reason,
                             spread, needs_dc=True)
    if not octave:
        reason = (f"the lowest {window.size} samples span only {span[0]:.6g}–{span[1]:.6g} Hz, "
                  "less than the octave the DC asymptote test needs")
        return EdgeJudgement("low", False, "open", 0.0, span[0], share, None, span, reason,
                             spread)
    if im_spread > DC_SHAPE_TOLERANCE or re_spread > DC_SHAPE_TOLERANCE:
        trend = "grows towards DC" if abs(im_ratio[-1]) < abs(im_ratio[0]) else "varies"
        reason = (f"over {span[0]:.6g}–{span[1]:.6g} Hz NDF is not on its DC asymptote: Im NDF/f "
                  f"{trend} by {im_spread:.3g} and Re NDF moves by {re_spread:.3g} (relative; "
                  f"both must stay within {DC_SHAPE_TOLERANCE:g}, i.e. Im ∝ f and Re flat)")
        return EdgeJudgement("low", False, "open", 0.0, span[0], share, None, span, reason,
                             spread)
    closure = float(np.angle(h[0] / n0))
    reason = (f"NDF is on its DC asymptote over {span[0]:.6g}–{span[1]:.6g} Hz (Im ∝ f within "
              f"{im_spread:.2g}, Re flat within {re_spread:.2g}); DC value {n0:.6g}")
    return EdgeJudgement("low", True, "dc_asymptote", closure, span[0], share, None, span, reason,
                         spread, n0)


def _share_slope(f: np.ndarray, share: np.ndarray) -> float:
    """Least-squares slope of ln share against ln f (−inf when the share vanishes)."""
    if np.any(share <= 0):
        return -math.inf
    x, y = np.log(f), np.log(share)
    return float(np.polyfit(x, y, 1)[0])


def judge_high_edge(frequency_hz: np.ndarray, h: np.ndarray,
                    fmax_hz: tuple[float | None, ...] = ()) -> EdgeJudgement:
    """The top end (module docstring); ``fmax_hz``: each device's declared f_max (None: not
    declared); the statement applies only when every device declares one."""
    f = np.asarray(frequency_hz, dtype=float)
    h = np.asarray(h, dtype=complex)
    top = float(f[-1])
    value = complex(h[-1])
    share = float(abs(value - 1.0))
    window = _edge_window(f, low=False)
    fw, sw = f[window], np.abs(h[window] - 1.0)
    span = (float(fw[0]), float(fw[-1]))
    upper = fw >= math.sqrt(fw[0] * fw[-1])
    slope = _share_slope(fw, sw) if fw[0] > 0 else None
    slope_upper = _share_slope(fw[upper], sw[upper]) if upper.sum() >= 2 and fw[0] > 0 else slope
    closure = -float(np.angle(value))
    limit = -(1.0 - TOP_SLOPE_TOLERANCE)
    if share <= NEGLIGIBLE_SHARE:
        return EdgeJudgement("high", True, "negligible_share", closure, top, share, slope, span,
                             f"the devices' share |NDF − 1| is {share:.2g} at {top:.6g} Hz")
    falling = slope is not None and slope_upper is not None and slope <= limit \
        and slope_upper <= limit
    octave = span[1] >= 2.0 * span[0] * (1 - 1e-9)
    if falling and octave and share <= TOP_SHARE_LIMIT:
        return EdgeJudgement(
            "high", True, "share_decay", closure, top, share, slope, span,
            f"the devices' share |NDF − 1| falls as f^{slope:.2f} over {span[0]:.6g}–"
            f"{span[1]:.6g} Hz and is {share:.3g} at the top: it cannot reach 1 again")
    declared = [x for x in fmax_hz if x is not None]
    if fmax_hz and len(declared) == len(fmax_hz) and top >= max(declared):
        if abs(math.degrees(closure)) <= AMBIGUOUS_CLOSURE_DEG:
            return EdgeJudgement(
                "high", True, "fmax_statement", closure, top, share, slope, span,
                f"the band reaches every device's declared f_max (largest {max(declared):.6g} "
                "Hz): no device has power gain above it")
        return EdgeJudgement(
            "high", False, "open", 0.0, top, share, slope, span,
            f"the band reaches every device's declared f_max, but NDF at {top:.6g} Hz lies near "
            f"the negative real axis (arg {math.degrees(-closure):.1f}°), so the way back to 1 "
            "is ambiguous")
    if slope is None or not octave:
        trend = "cannot be measured over an octave"
    elif slope > -TOP_SLOPE_TOLERANCE:
        trend = f"is {'rising' if slope > TOP_SLOPE_TOLERANCE else 'flat'} (slope {slope:.2f})"
    elif not falling:
        trend = (f"falls more slowly than 1/f (slope {slope:.2f}, upper half "
                 f"{slope_upper:.2f}; limit {limit:.2f})")
    else:
        trend = f"falls as f^{slope:.2f}"
    reason = (f"at {top:.6g} Hz the devices' share |NDF − 1| is {share:.3g} "
              f"(limit {TOP_SHARE_LIMIT:g}) and over {span[0]:.6g}–{span[1]:.6g} Hz it {trend}")
    return EdgeJudgement("high", False, "open", 0.0, top, share, slope, span, reason)
