"""Two-port stability factors, gains and stability circles, vectorised over frequency.

Everything takes S-parameters ``s`` of shape (F, 2, 2), frequency first, and returns one value
per frequency. Formulas and sources:

* Rollett K = (1 - |S11|² - |S22|² + |Δ|²) / (2 |S12 S21|), Δ = S11 S22 - S12 S21
  (J. M. Rollett, IRE Trans. Circuit Theory 9(1), 1962; Pozar, Microwave Engineering,
  4th ed., section 12.1).
* B1 = 1 + |S11|² - |S22|² - |Δ|², B2 = 1 + |S22|² - |S11|² - |Δ|² (Gonzalez, Microwave
  Transistor Amplifiers, 2nd ed., section 3.6).
* Edwards–Sinsky μ = (1 - |S11|²) / (|S22 - Δ S11*| + |S12 S21|) and μ' with 1 ↔ 2
  (M. L. Edwards and J. H. Sinsky, IEEE Trans. MTT 40(12), 1992).
* MAG = |S21/S12| (K - √(K² - 1)) for K ≥ 1, B1 > 0; MSG = |S21/S12| (Gonzalez, 2nd ed.,
  section 3.8). MAG is evaluated in the algebraically equal form
  2 |S21|² / (N + √(N² - (2 |S12 S21|)²)), N the numerator of K, which stays finite for a
  unilateral device (S12 = 0), where it equals |S21|² / ((1 - |S11|²)(1 - |S22|²)); N and the
  difference under the root are formed in double-double arithmetic so that MAG stays accurate
  at K = 1 (``workers.engine.gains``).
* Load stability circle C_L = (S22 - Δ S11*)* / D_L, R_L = |S12 S21| / |D_L|,
  D_L = |S22|² - |Δ|²; source circle with 1 ↔ 2 (Pozar, 4th ed., section 12.1).

Degenerate cases are explicit, never warnings: with S12 S21 = 0, K = ±inf carrying the sign of
its numerator (nan for 0/0); a circle whose D is zero is a straight line (radius inf, centre
nan, ``is_line`` True).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from workers.engine.errors import InputError
from workers.engine.gains import maximum_available_gain, root_terms

# |D| below this multiple of eps (relative to the terms it is the difference of) is a line.
_LINE_TOLERANCE = 64.0 * np.finfo(float).eps

PROVISO = (
    "These two-port factors (K, |Δ|, mu, mu') judge only what can be seen from the two external "
    "ports, with the circuit inside the two-port left exactly as it is. A loop that closes "
    "inside the device or its network (a bias feed, an odd mode between paralleled devices, a "
    "path through a shared ground) can oscillate while K > 1 and mu > 1, because no port "
    "termination ever enters that loop. The K test also rests on Rollett's proviso: it presumes "
    "that the two-port itself, with both ports terminated in the reference impedance, has no "
    "poles in the right half-plane; an S-parameter set that is already unstable there can still "
    "show K > 1. Check the internal loops (for example with the NDF or return differences) "
    "before calling an amplifier stable."
)


@dataclass(frozen=True, eq=False)
class StabilityCircle:
    """One stability circle per frequency: the locus |Γ_in| = 1 (load) or |Γ_out| = 1 (source).

    For a line (``is_line``), ``centre`` is nan, ``radius`` is inf and ``line_foot`` is the
    point of the line nearest the origin. "Inside" a line means the half-plane into which the
    normal (S22 - Δ S11*)* (load) points: the limit of the disk as D → 0, so ``stable_inside``
    keeps its meaning across the degeneracy.
    """

    centre: np.ndarray
    radius: np.ndarray
    is_line: np.ndarray
    line_foot: np.ndarray
    stable_inside: np.ndarray
    unstable_reaches_unit_disk: np.ndarray


@dataclass(frozen=True, eq=False)
class TwoPortFactors:
    """Per-frequency two-port factors; every array has shape (F,). Gains are power ratios."""

    k: np.ndarray
    delta: np.ndarray
    delta_abs: np.ndarray
    b1: np.ndarray
    b2: np.ndarray
    mu: np.ndarray
    mu_prime: np.ndarray
    mag: np.ndarray
    mag_db: np.ndarray
    msg: np.ndarray
    msg_db: np.ndarray
    mag_applies: np.ndarray
    max_gain: np.ndarray
    max_gain_db: np.ndarray
    load_circle: StabilityCircle
    source_circle: StabilityCircle


@dataclass(frozen=True)
class TwoPortSummary:
    """Worst cases over frequency and the bands where the device is potentially unstable."""

    k_min: float
    k_min_hz: float | None
    mu_min: float
    mu_min_hz: float | None
    mu_prime_min: float
    mu_prime_min_hz: float | None
    unstable_bands_hz: tuple[tuple[float, float], ...]
    unconditionally_stable: bool
    proviso: str

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-safe types; inf and nan become None."""
        return {
            "k_min": _json_float(self.k_min),
            "k_min_hz": _json_float(self.k_min_hz),
            "mu_min": _json_float(self.mu_min),
            "mu_min_hz": _json_float(self.mu_min_hz),
            "mu_prime_min": _json_float(self.mu_prime_min),
            "mu_prime_min_hz": _json_float(self.mu_prime_min_hz),
            "unstable_bands_hz": [
                [_json_float(lo), _json_float(hi)] for lo, hi in self.unstable_bands_hz
            ],
            "unconditionally_stable": bool(self.unconditionally_stable),
            "proviso": self.proviso,
        }


def _json_float(value: float | None) -> float | None:
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _check_two_port(s: np.ndarray) -> np.ndarray:
    s = np.asarray(s)
    if s.ndim != 3 or s.shape[1:] != (2, 2):
        raise InputError("s", f"expected shape (F, 2, 2), got {s.shape}")
    if s.shape[0] == 0:
        raise InputError("s", "no frequencies")
    s = s.astype(complex)
    if not np.all(np.isfinite(s)):
        raise InputError("s", "contains nan or inf")
    return s


def _safe_ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    """num / den, with ±inf (sign of num) where den == 0 and nan for 0/0, without warnings."""
    out = np.where(num > 0, np.inf, np.where(num < 0, -np.inf, np.nan))
    with np.errstate(over="ignore"):  # a subnormal denominator overflows to inf, as it should
        np.divide(num, den, out=out, where=den != 0)
    return out


def _power_db(ratio: np.ndarray) -> np.ndarray:
    """10 log10 of a power ratio; 0 → -inf, inf → inf, nan stays nan, no warnings."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return 10.0 * np.log10(ratio)


def _circle_terms(
    s_near: np.ndarray, s_far: np.ndarray, loop: np.ndarray, cross: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """C = S_far - Δ S_near* and D = |S_far|² - |Δ|², expanded with Δ = S11 S22 - S12 S21.

    C = S_far (1 - |S_near|²) + S12 S21 S_near* and
    D = |S_far|² (1 - |S_near|²) - |S12 S21|² + 2 Re(S11 S22 (S12 S21)*): the same numbers,
    but the factor 1 - |S_near|² is shared with mu's numerator, so a unilateral device
    (S12 S21 = 0) gets exact signs instead of rounding noise.
    """
    margin = 1.0 - np.abs(s_near) ** 2
    c_vec = s_far * margin + loop * np.conj(s_near)
    d = np.abs(s_far) ** 2 * margin - np.abs(loop) ** 2 + cross
    return c_vec, d


def _stability_circle(
    s_near: np.ndarray, s_far: np.ndarray, delta: np.ndarray, loop: np.ndarray,
    cross: np.ndarray,
) -> StabilityCircle:
    """Circle where the reflection at the *near* port has magnitude 1, in the far port's Γ plane.

    For the load circle, s_near = S11 and s_far = S22. With D = |S_far|² - |Δ|² and
    C = S_far - Δ S_near*, |Γ_near| < 1 ⇔ g(Γ) = D |Γ|² - 2 Re(C Γ) + 1 - |S_near|² > 0
    (expand |S_near - Δ Γ|² < |1 - S_far Γ|²). For D ≠ 0, g = D (|Γ - C*/D|² - R²), so the
    stable side is outside the circle when D > 0 and inside when D < 0; at Γ = 0 this gives the
    usual rule (origin stable iff |S_near| < 1). For D = 0 the locus is the line
    Re(C Γ) = (1 - |S_near|²) / 2 and the stable side is Re(C Γ) < (1 - |S_near|²) / 2.
    """
    c_vec, d = _circle_terms(s_near, s_far, loop, cross)
    scale = np.maximum(np.abs(s_far) ** 2, np.abs(delta) ** 2)
    is_line = np.abs(d) <= _LINE_TOLERANCE * np.maximum(scale, 1.0)
    safe_d = np.where(is_line, 1.0, d)

    centre = np.where(is_line, complex(np.nan, np.nan), np.conj(c_vec) / safe_d)
    radius = np.where(is_line, np.inf, np.abs(loop) / np.abs(safe_d))

    half_margin = (1.0 - np.abs(s_near) ** 2) / 2.0
    c_abs = np.abs(c_vec)
    # Foot of the perpendicular from the origin: h C* / |C|² = h / C.
    has_foot = is_line & (c_abs > 0)
    line_foot = np.full(c_vec.shape, complex(np.nan, np.nan))
    with np.errstate(over="ignore", invalid="ignore"):  # subnormal C: foot at inf or nan
        np.divide(half_margin, c_vec, out=line_foot, where=has_foot)

    stable_inside = ~is_line & (d < 0)
    centre_abs = np.abs(np.where(is_line, 0.0, centre))
    # Stable inside: the unstable outside misses the open unit disk only if the disk
    # |Γ| <= 1 lies within the circle. Stable outside: the open disk of radius R must overlap it.
    reaches_if_inside = centre_abs + 1.0 > radius
    reaches_if_outside = (radius > 0) & (centre_abs < 1.0 + radius)
    # Line: the unstable half-plane Re(C Γ) >= h meets |Γ| < 1 iff h < |C|.
    reaches_if_line = half_margin < c_abs
    unstable_reaches = np.where(
        is_line, reaches_if_line, np.where(stable_inside, reaches_if_inside, reaches_if_outside)
    )
    return StabilityCircle(
        centre=centre,
        radius=radius,
        is_line=is_line,
        line_foot=line_foot,
        stable_inside=stable_inside,
        unstable_reaches_unit_disk=unstable_reaches,
    )


def two_port_factors(s: np.ndarray) -> TwoPortFactors:
    """Rollett K, |Δ|, B1/B2, Edwards–Sinsky μ/μ', MAG/MSG and both stability circles.

    ``s``: complex S-parameters, shape (F, 2, 2). Sources are listed in the module docstring.
    MAG applies where the device is unconditionally stable (K ≥ 1 and B1 > 0); everywhere
    else (K < 1, or K ≥ 1 with B1 ≤ 0, i.e. |Δ| > 1) ``max_gain`` is MSG and ``mag`` is nan.
    """
    s = _check_two_port(s)
    s11, s12, s21, s22 = s[:, 0, 0], s[:, 0, 1], s[:, 1, 0], s[:, 1, 1]
    loop = s12 * s21
    delta = s11 * s22 - loop
    abs11_sq, abs22_sq, delta_sq = np.abs(s11) ** 2, np.abs(s22) ** 2, np.abs(delta) ** 2
    loop_abs = np.abs(loop)

    # 1 - |S11|² - |S22|² + |Δ|² and N² - (2|S12 S21|)², both in double-double arithmetic
    # (``gains``): accurate where K is near 1; for S12 S21 = 0 within about 2^-104 of the
    # closed form (1-|S11|²)(1-|S22|²)
    cross = 2.0 * np.real(s11 * s22 * np.conj(loop))
    k_numerator, root_difference = root_terms(s11, s12, s21, s22)
    k = _safe_ratio(k_numerator, 2.0 * loop_abs)
    b1 = 1.0 + abs11_sq - abs22_sq - delta_sq
    b2 = 1.0 + abs22_sq - abs11_sq - delta_sq

    c_load, _ = _circle_terms(s11, s22, loop, cross)
    c_source, _ = _circle_terms(s22, s11, loop, cross)
    mu = _safe_ratio(1.0 - abs11_sq, np.abs(c_load) + loop_abs)
    mu_prime = _safe_ratio(1.0 - abs22_sq, np.abs(c_source) + loop_abs)

    mag_applies = (k >= 1.0) & (b1 > 0.0)
    mag = maximum_available_gain(s21, k_numerator, root_difference, mag_applies)
    msg = _safe_ratio(np.abs(s21), np.abs(s12))
    max_gain = np.where(mag_applies, mag, msg)

    return TwoPortFactors(
        k=k,
        delta=delta,
        delta_abs=np.abs(delta),
        b1=b1,
        b2=b2,
        mu=mu,
        mu_prime=mu_prime,
        mag=mag,
        mag_db=_power_db(mag),
        msg=msg,
        msg_db=_power_db(msg),
        mag_applies=mag_applies,
        max_gain=max_gain,
        max_gain_db=_power_db(max_gain),
        load_circle=_stability_circle(s11, s22, delta, loop, cross),
        source_circle=_stability_circle(s22, s11, delta, loop, cross),
    )


def _minimum_and_where(
    frequency_hz: np.ndarray, values: np.ndarray
) -> tuple[float, float | None]:
    """Smallest non-nan value and its frequency; (nan, None) when every value is nan."""
    if np.all(np.isnan(values)):
        return math.nan, None
    index = int(np.nanargmin(values))
    return float(values[index]), float(frequency_hz[index])


def _crossing(f_out: float, f_in: float, m_out: float, m_in: float) -> float:
    """Frequency where mu - 1 crosses zero between an outside sample and an inside sample.

    Linear interpolation of mu - 1; when the outside sample is not finite (inf or nan) the edge
    stays on the inside sample.
    """
    if not math.isfinite(m_out):
        return f_in
    fraction = (m_out - 1.0) / (m_out - m_in)
    return f_out + fraction * (f_in - f_out)


def _unstable_bands(frequency_hz: np.ndarray, mu: np.ndarray) -> tuple[tuple[float, float], ...]:
    """Contiguous runs where mu < 1, edges by linear interpolation of mu - 1 between samples."""
    below = mu < 1.0
    if not np.any(below):
        return ()
    edges = np.diff(below.astype(np.int8))
    starts = list(np.flatnonzero(edges == 1) + 1)
    stops = list(np.flatnonzero(edges == -1))
    if below[0]:
        starts.insert(0, 0)
    if below[-1]:
        stops.append(len(mu) - 1)
    bands = []
    for start, stop in zip(starts, stops, strict=True):
        lo = float(frequency_hz[start])
        if start > 0:
            lo = _crossing(
                float(frequency_hz[start - 1]), lo, float(mu[start - 1]), float(mu[start])
            )
        hi = float(frequency_hz[stop])
        if stop < len(mu) - 1:
            hi = _crossing(float(frequency_hz[stop + 1]), hi, float(mu[stop + 1]), float(mu[stop]))
        bands.append((lo, hi))
    return tuple(bands)


def summarise_two_port(frequency_hz: np.ndarray, f: TwoPortFactors) -> TwoPortSummary:
    """Minimum K, μ, μ' (and where), and the bands of potential instability (μ < 1).

    By Edwards & Sinsky (1992), μ > 1 alone is necessary and sufficient for unconditional
    stability, so the bands are taken from μ; in exact arithmetic μ' < 1 on the same samples.
    """
    frequency_hz = np.asarray(frequency_hz, dtype=float)
    if frequency_hz.shape != f.k.shape:
        raise InputError(
            "frequency_hz", f"expected shape {f.k.shape}, got {frequency_hz.shape}"
        )
    if not np.all(np.isfinite(frequency_hz)) or np.any(np.diff(frequency_hz) <= 0):
        raise InputError("frequency_hz", "must be finite and strictly increasing")
    k_min, k_min_hz = _minimum_and_where(frequency_hz, f.k)
    mu_min, mu_min_hz = _minimum_and_where(frequency_hz, f.mu)
    mu_prime_min, mu_prime_min_hz = _minimum_and_where(frequency_hz, f.mu_prime)
    return TwoPortSummary(
        k_min=k_min,
        k_min_hz=k_min_hz,
        mu_min=mu_min,
        mu_min_hz=mu_min_hz,
        mu_prime_min=mu_prime_min,
        mu_prime_min_hz=mu_prime_min_hz,
        unstable_bands_hz=_unstable_bands(frequency_hz, f.mu),
        unconditionally_stable=bool(np.all(f.mu > 1.0)),
        proviso=PROVISO,
    )


def z_to_s(z: np.ndarray, z0: np.ndarray) -> np.ndarray:
    """S-parameters from Z-parameters with a real, positive reference resistance per port.

    S = R^(-1/2) (Z - R) (Z + R)^(-1) R^(1/2), R = diag(z0): the normalised form
    s = (z - I)(z + I)^(-1) with z = R^(-1/2) Z R^(-1/2) (Pozar, Microwave Engineering, 4th ed.,
    section 4.3, which normalises to the port impedances). For real references this is both
    the power-wave (Kurokawa, IEEE Trans. MTT 13(2), 1965, eq. 18) and the pseudo-wave
    definition. X = A B^(-1) is computed as solve(Bᵀ, Aᵀ)ᵀ; nothing is inverted or nudged.
    """
    z = np.asarray(z)
    if z.ndim != 3 or z.shape[1] != z.shape[2] or z.shape[0] == 0:
        raise InputError("z", f"expected shape (F, N, N), got {z.shape}")
    z0 = np.asarray(z0)
    if z0.shape != (z.shape[1],):
        raise InputError("z0", f"expected shape ({z.shape[1]},), got {z0.shape}")
    if np.iscomplexobj(z0) and np.any(z0.imag != 0):
        raise InputError("z0", "reference impedances must be real")
    z0 = z0.real.astype(float)
    if not np.all(np.isfinite(z0)) or np.any(z0 <= 0):
        raise InputError("z0", "reference impedances must be finite and positive")
    z = z.astype(complex)
    root = np.sqrt(z0)
    scaled = z / root[:, None] / root[None, :]  # z = R^(-1/2) Z R^(-1/2)
    identity = np.eye(z.shape[1])
    numerator = scaled - identity
    denominator = scaled + identity
    try:
        solved = np.linalg.solve(denominator.transpose(0, 2, 1), numerator.transpose(0, 2, 1))
    except np.linalg.LinAlgError as error:
        raise InputError("z", "Z + Z0 is singular at some frequency") from error
    return solved.transpose(0, 2, 1)
