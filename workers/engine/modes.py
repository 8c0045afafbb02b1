"""Where the unstable natural frequencies live, estimated from the samples alone.

An unstable pair σ ± jω₀ (σ small) makes NDF(jω) turn sharply clockwise near ω₀ — a phase drop of
about π — where a stable high-Q pair makes it turn anticlockwise (argument of jω − p for each root
p; common practice). So the sample estimate of a mode frequency is a local extreme of −dφ/d ln f,
replaced by a Kurokawa point nearby when one exists, whose frequency is located between samples.
The rational model (``refine``) supersedes these estimates when it validates.
"""

from __future__ import annotations

import numpy as np

from workers.engine.nodes import KurokawaCrossing


def phase_drop_frequencies(frequency_hz: np.ndarray, ndf: np.ndarray, how_many: int
                           ) -> list[float]:
    """The ``how_many`` frequencies where NDF turns clockwise fastest (per unit of ln f)."""
    if how_many <= 0:
        return []
    positive = frequency_hz > 0
    f, h = frequency_hz[positive], ndf[positive]
    if f.size < 3:
        return []
    phase = np.unwrap(np.angle(h))
    slope = np.diff(phase) / np.diff(np.log(f))
    centres = np.sqrt(f[:-1] * f[1:])
    candidates = [i for i in range(slope.size)
                  if slope[i] < 0
                  and (i == 0 or slope[i] <= slope[i - 1])
                  and (i == slope.size - 1 or slope[i] <= slope[i + 1])]
    candidates.sort(key=lambda i: slope[i])
    return [float(centres[i]) for i in candidates[:how_many]]


def nearest_crossing(frequency_hz: float, crossings: list[KurokawaCrossing],
                     ratio: float = 1.25) -> KurokawaCrossing | None:
    """The Kurokawa point closest (in ln f) to ``frequency_hz`` within a factor ``ratio``."""
    best = None
    for c in crossings:
        if c.frequency_hz <= 0 or frequency_hz <= 0:
            continue
        distance = abs(np.log(c.frequency_hz / frequency_hz))
        if distance <= np.log(ratio) and (best is None or distance < best[0]):
            best = (distance, c)
    return best[1] if best else None


def node_participation(frequency_hz: np.ndarray, impedance: np.ndarray, at_hz: float
                       ) -> np.ndarray:
    """How strongly a mode shows at each node: |Z_kk| at the mode over its band geometric mean,
    scaled so the strongest node has 1."""
    i = int(np.argmin(np.abs(frequency_hz - at_hz)))
    magnitude = np.abs(impedance)
    with np.errstate(divide="ignore", invalid="ignore"):
        level = np.exp(np.nanmean(np.log(np.where(magnitude > 0, magnitude, np.nan)), axis=0))
        peaking = magnitude[i] / level
    peaking = np.where(np.isfinite(peaking), peaking, 0.0)
    top = peaking.max() if peaking.size and peaking.max() > 0 else 1.0
    return peaking / top
