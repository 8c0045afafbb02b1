"""Rational models of sampled responses: AAA fits on the jω axis, validated by leave-out error.

The fit is the AAA algorithm (Y. Nakatsukasa, O. Sète, L. N. Trefethen, "The AAA algorithm for
rational approximation", SIAM J. Sci. Comput. 40(3), A1494–A1522, 2018), run by the lean core in
``workers.engine.aaa`` (the same steps as ``scipy.interpolate.AAA``, its test oracle). A real
circuit's response obeys H(−jω) = conj H(jω), so every fit sees the samples twice: at s = jω and,
mirrored, at s = −jω with conjugated values; its poles and zeros then come in conjugate pairs.
Frequencies are scaled by the top of the band.

Validation by leave-out: one model is fitted on the even-numbered samples and checked on the odd
ones. When it converges to rounding level and reproduces the unseen samples to EXACT_LEVEL, the
data is rational and that model stands alone. Otherwise the even fit's error history gives the
noise floor (the error stalls on a plateau at the noise level), both halves are fitted with a
tolerance just above that plateau so that they stop before fitting noise, and each is checked on
the samples the other saw. A pole–zero pair whose effect on the axis is below the noise floor is
a Froissart doublet (op. cit., sec. 5) and is discarded; with two half-models a zero is only kept
when both find it (a zero fitted into noise does not repeat on independent samples).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from workers.engine.aaa import AAAFit, aaa
from workers.engine.refine_report import ModelSummary

MAX_FIT_SAMPLES = 2001   # larger sets are thinned evenly for fitting (all samples validate)
MAX_TERMS = 50           # largest barycentric order (bounds the cost of every fit)
TIGHT_RTOL = 1e-9        # AAA tolerance for data rational to (text-file) rounding level
EXACT_RTOL = 1e-13       # ... tried when a TIGHT_RTOL fit misses the samples it did not see
NOISE_MARGIN = 4.0       # tolerance of a fit given a known noise floor
PLATEAU_MARGIN = 1.5     # refit tolerance = PLATEAU_MARGIN × the stalled fit error
EXACT_LEVEL = 1e-8       # leave-out error (of max|H|) of data rational to rounding level
VALIDATION_LIMIT = 2e-3  # largest leave-out error (relative to max|H|) of a validated model
LOCAL_LIMIT = 0.25       # largest leave-out error relative to |H| at the same sample
CANCEL_RELATIVE = 1e-6   # pole–zero pairs closer than this × |z| cancel (see _drop_doublets)
DOUBLET_FACTOR = 30.0    # pole–zero pairs that move H by less than this × noise are doublets
MATCH_TOLERANCE = 0.02   # two half-models' zeros agree within this fraction of |z| ...
MATCH_GROWTH = 0.25      # ... or within this fraction of |Re z|, whichever is larger


@dataclass(frozen=True)
class HalfFit:
    """One AAA fit on every other sample (mirrored), in scaled units s/ω_top."""

    fit: AAAFit
    terms: int
    converged: bool
    max_terms: int = MAX_TERMS  # the step limit the fit ran with
    level: float = np.inf       # max|H| over its samples


def _half(fit: AAAFit, rtol: float, max_terms: int, level: float) -> HalfFit:
    m = int(fit.weights.size)
    return HalfFit(fit, m, bool(fit.errors[-1] <= rtol * level or m < max_terms), max_terms,
                   level)


def evenly_spread(count: int, limit: int) -> np.ndarray:
    """Indices of at most ``limit`` of ``count`` samples, evenly spread (all when count <= limit:
    the rounded linspace is then 0 … count − 1 exactly)."""
    if count <= limit:
        return np.arange(count)
    return np.unique(np.linspace(0, count - 1, limit).round()).astype(int)


def _mirror(s: np.ndarray, h: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return np.concatenate([s, -s]), np.concatenate([h, np.conj(h)])


def aaa_fit(s: np.ndarray, h: np.ndarray, rtol: float, max_terms: int = MAX_TERMS) -> HalfFit:
    """AAA on the mirrored samples ``s`` (scaled jω), without a doublet clean-up.

    Stopping at ``max_terms`` is returned as ``converged=False`` and judged by the leave-out
    check instead.
    """
    increasing = s.size > 0 and not s.real.any() and s[0].imag > 0 and \
        bool(np.all(s.imag[1:] > s.imag[:-1]))
    if increasing:  # mirrored points in ascending order: −jω_top … −jω_0, jω_0 … jω_top
        z, values = np.concatenate([-s[::-1], s]), np.concatenate([np.conj(h[::-1]), h])
    else:
        z, values = _mirror(s, h)
    terms = int(max(2, min(max_terms, z.size // 3)))
    fit = aaa(z, values, rtol, terms, presorted=increasing)
    return _half(fit, rtol, terms, float(np.max(np.abs(values))))


def refit(half: HalfFit, rtol: float) -> HalfFit:
    """``aaa_fit`` on the same samples with the looser tolerance ``rtol``, without fitting again
    (``AAAFit.truncated``: the same greedy steps, stopped earlier)."""
    return _half(half.fit.truncated(rtol), rtol, half.max_terms, half.level)


def _drop_doublets(zeros: np.ndarray, poles: np.ndarray, s_axis: np.ndarray, noise: float
                   ) -> tuple[np.ndarray, int]:
    """Zeros that do not nearly cancel a pole (scaled units); with the roles swapped, poles.

    A pair (z, p) multiplies H by (s − z)/(s − p) = 1 + (p − z)/(s − p); on the sampled axis that
    moves H by at most |p − z| / dist(p, samples). Below DOUBLET_FACTOR × noise it is invisible in
    the data, so it cannot be told from a Froissart doublet. A pair closer than CANCEL_RELATIVE·|z|
    is dropped too: NDF's poles lie in the closed left half-plane, so a genuine right-half-plane
    zero is at least Re z from every pole, and Re z < 1e-6·|z| is beyond any sampled data.
    """
    if zeros.size == 0 or poles.size == 0:
        return zeros, 0
    gap = np.abs(zeros[:, None] - poles[None, :])
    nearest = np.argmin(gap, axis=1)
    closest = gap[np.arange(zeros.size), nearest]
    reach = np.min(np.abs(poles[nearest][:, None] - s_axis[None, :]), axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        effect = closest / reach
    spurious = (effect < DOUBLET_FACTOR * max(noise, 1e-13)) | \
        (closest <= CANCEL_RELATIVE * np.abs(zeros))
    return zeros[~spurious], int(spurious.sum())


def _matched(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Zeros of ``a`` that ``b`` also has (greedy nearest match); their mean positions."""
    kept = []
    free = list(range(b.size))
    for z in a[np.argsort(np.abs(a))]:
        if not free:
            break
        distances = np.abs(b[free] - z)
        j = int(np.argmin(distances))
        tolerance = max(MATCH_TOLERANCE * abs(z), MATCH_GROWTH * abs(z.real))
        if distances[j] <= tolerance and np.sign(b[free[j]].real) == np.sign(z.real):
            kept.append(0.5 * (z + b[free[j]]))
            free.pop(j)
    return np.asarray(kept, dtype=complex)


@dataclass(frozen=True)
class RationalModel:
    """A validated (or rejected) rational model of one sampled response H(jω).

    Errors are relative to max|H| over the samples. ``zeros_rad_s``/``poles_rad_s`` are in rad/s
    (s-plane), Froissart doublets removed, zeros confirmed by both half-models.
    """

    frequency_hz: np.ndarray
    scale_rad_s: float
    even: HalfFit
    odd: HalfFit | None  # None: the data is rational to rounding level, one half-model suffices
    fit_error: float
    leave_out_error: float
    local_error: float
    noise_floor: float
    validated: bool
    zeros_rad_s: np.ndarray
    poles_rad_s: np.ndarray
    doublets_removed: int
    unmatched_zeros: int
    misses: np.ndarray | None = None  # (F,) leave-out miss per sample / max|H| (NaN: not left out)

    @property
    def terms(self) -> int:
        return max(half.terms for half in self.halves)

    @property
    def halves(self) -> tuple[HalfFit, ...]:
        return (self.even,) if self.odd is None else (self.even, self.odd)

    def at_s(self, s_rad_s: np.ndarray) -> np.ndarray:
        """The model at complex frequencies s (rad/s): the mean of the half-models."""
        x = np.asarray(s_rad_s, dtype=complex) / self.scale_rad_s
        if self.odd is None:
            return self.even.fit(x)
        return 0.5 * (self.even.fit(x) + self.odd.fit(x))

    def im_on_axis(self, frequency_hz: float) -> float:
        """Im of the model at one frequency (Hz): the cheap scalar path for root finding."""
        with np.errstate(all="ignore"):
            return self.im_on_axis_unguarded(frequency_hz)

    def im_on_axis_unguarded(self, frequency_hz: float) -> float:
        """``im_on_axis`` for callers that have set numpy's error state (root finders call it
        many times in a row)."""
        x = 1j * frequency_hz * (2 * np.pi / self.scale_rad_s)
        total = 0.0
        for fit, points, weighted, weights in self._barycentric:
            gap = x - points
            if not gap.all():  # x is a support point
                total += float(fit(np.array([x]))[0].imag)
                continue
            cauchy = 1.0 / gap
            total += float(((cauchy @ weighted) / (cauchy @ weights)).imag)
        return total / (1 if self.odd is None else 2)

    @cached_property
    def _barycentric(self) -> tuple[tuple[AAAFit, np.ndarray, np.ndarray, np.ndarray], ...]:
        return tuple((half.fit, half.fit.support_points, half.fit.weighted_values,
                      half.fit.weights) for half in self.halves)

    def __call__(self, frequency_hz: np.ndarray) -> np.ndarray:
        """The model on the jω axis at ``frequency_hz``."""
        return self.at_s(2j * np.pi * np.asarray(frequency_hz, dtype=float))

    def summary(self) -> ModelSummary:
        return ModelSummary(self.terms, self.fit_error, self.leave_out_error, self.local_error,
                            self.noise_floor, self.validated, self.doublets_removed,
                            self.unmatched_zeros)


def fit_response(frequency_hz: np.ndarray, h: np.ndarray) -> RationalModel:
    """Fit, validate and clean a rational model of H sampled at ``frequency_hz`` (module doc).

    ``h`` must be finite; needs at least 8 samples. The noise floor is read from the even
    half-fit's error history: rational data converges to rounding level, noisy data stalls on a
    plateau at the noise level, and the fits are then stopped just above that plateau.
    """
    f = np.asarray(frequency_hz, dtype=float)
    h = np.asarray(h, dtype=complex)
    if f.size < 8:
        raise ValueError("a rational model needs at least 8 samples")
    top = float(f[-1])
    scale = 2 * np.pi * top
    s = 1j * f / top
    level = float(np.max(np.abs(h)))
    # training halves: alternate samples (of an evenly thinned set when F > MAX_FIT_SAMPLES)
    chosen = evenly_spread(f.size, MAX_FIT_SAMPLES)
    train = (chosen[0::2], chosen[1::2])
    unseen = (train[1], train[0]) if chosen.size == f.size else \
        [np.setdiff1d(np.arange(f.size), t, assume_unique=True) for t in train]
    even = aaa_fit(s[train[0]], h[train[0]], TIGHT_RTOL)
    rtol = TIGHT_RTOL
    noise = float(even.fit.errors[-1]) / level
    if not even.converged:
        history = np.asarray(even.fit.errors, dtype=float) / level
        plateau = float(np.median(history[-max(3, history.size // 4):]))
        rtol, noise = PLATEAU_MARGIN * plateau, plateau / 3.0
        even = refit(even, rtol)
    missed = np.abs(even.fit(s[unseen[0]]) - h[unseen[0]])
    if rtol == TIGHT_RTOL and float(np.max(missed)) / level > EXACT_LEVEL:
        # converged on its samples but not between them: features narrower than the spacing
        # need more terms than TIGHT_RTOL asks for; exact data then converge further
        tighter = aaa_fit(s[train[0]], h[train[0]], EXACT_RTOL)
        missed_tighter = np.abs(tighter.fit(s[unseen[0]]) - h[unseen[0]])
        if tighter.converged and float(np.max(missed_tighter)) < 0.01 * float(np.max(missed)):
            even, missed, rtol = tighter, missed_tighter, EXACT_RTOL
            noise = float(even.fit.errors[-1]) / level
    sampled = np.abs(h[unseen[0]])
    odd: HalfFit | None = None
    if not (rtol <= TIGHT_RTOL and float(np.max(missed)) / level <= EXACT_LEVEL):
        odd = aaa_fit(s[train[1]], h[train[1]], rtol)
        missed = np.concatenate([missed, np.abs(odd.fit(s[unseen[1]])
                                                - h[unseen[1]])])
        sampled = np.concatenate([sampled, np.abs(h[unseen[1]])])
    halves = (even,) if odd is None else (even, odd)
    misses = np.full(f.size, np.nan)
    left_out = unseen[0] if odd is None else np.concatenate([unseen[0], unseen[1]])
    misses[left_out] = missed / level
    noise = max(noise, 1e-14)
    leave_out = float(np.max(missed)) / level
    with np.errstate(divide="ignore", invalid="ignore"):
        local = float(np.max(missed / sampled))
    fit_error = max(float(half.fit.errors[-1]) for half in halves) / level
    validated = bool(np.isfinite(leave_out) and leave_out <= VALIDATION_LIMIT
                     and local <= LOCAL_LIMIT)
    axis = np.concatenate([s[chosen], -s[chosen]])
    kept, kept_poles = [], []
    doublets = 0
    for half in halves:
        zeros, dropped = _drop_doublets(half.fit.roots(), half.fit.poles(), axis, noise)
        kept.append(zeros)
        doublets += dropped
        kept_poles.append(_drop_doublets(half.fit.poles(), half.fit.roots(), axis, noise)[0])
    if odd is None:
        confirmed, poles, unmatched = kept[0], kept_poles[0], 0
    else:
        confirmed = _matched(kept[0], kept[1])
        unmatched = int(max(kept[0].size, kept[1].size) - confirmed.size)
        poles = _matched(kept_poles[0], kept_poles[1])
    return RationalModel(
        frequency_hz=f, scale_rad_s=scale, even=even, odd=odd, fit_error=fit_error,
        leave_out_error=leave_out, local_error=local, noise_floor=noise, validated=validated,
        zeros_rad_s=confirmed * scale, poles_rad_s=poles * scale, doublets_removed=doublets,
        unmatched_zeros=unmatched, misses=misses,
    )


def fit_single(frequency_hz: np.ndarray, h: np.ndarray, noise_floor: float = 0.0
               ) -> tuple[AAAFit, float]:
    """One AAA fit on all samples (mirrored), tolerance from a known noise floor.

    Returns the fit (scaled units s/(2π·f_top)) and its relative error on the samples. Used for
    attribution (return differences), never for the verdict's count.
    """
    f = np.asarray(frequency_hz, dtype=float)
    s = 1j * f / f[-1]
    rtol = max(TIGHT_RTOL, NOISE_MARGIN * noise_floor)
    half = aaa_fit(s, np.asarray(h, dtype=complex), rtol)
    error = float(half.fit.errors[-1]) / float(np.max(np.abs(h)))
    return half.fit, error
