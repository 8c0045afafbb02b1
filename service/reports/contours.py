"""Contours to draw: NDF and each return difference F_k, the validated model between samples.

A polygon through the samples cuts corners wherever the curve turns fast between two samples
(near a lightly damped pair it turns by tens of degrees per sample). The engine's refinement
(``workers.engine.refine``) already evaluates the validated rational model there until no segment
turns by more than half the phase-step limit; for a smooth picture the report adds model points
wherever a segment still turns by more than DRAW_STEP_DEG or spans more than DRAW_CHORD of the
picture (in the compressed radius the whole view uses). Points from the model are flagged, so the
plots can show which stretches are the model and not the data. No matplotlib here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workers.engine.encirclement import Encirclements, count_encirclements
from workers.engine.models import RationalModel, fit_response
from workers.engine.refine import Refinement, refine_contour, suspect_intervals

DRAW_STEP_DEG = 4.0       # largest turn of a drawn segment
DRAW_CHORD = 0.01         # largest drawn segment, as a share of the compressed view's radius
MAX_PER_SEGMENT = 32      # model points added inside one segment
MAX_DRAWN_POINTS = 8000   # model points added for drawing, in all


def compress(z: np.ndarray) -> np.ndarray:
    """z·log10(1 + |z|)/|z|: keeps the argument, squeezes the radius (0 stays 0)."""
    r = np.abs(z)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(r > 0, z / r * np.log10(1.0 + r), 0j)


@dataclass(frozen=True)
class Contour:
    """A response on f ≥ 0 as drawn: samples, and (flagged) model points between them."""

    frequency_hz: np.ndarray          # increasing
    values: np.ndarray                # complex
    from_model: np.ndarray            # bool per point: the validated model, not a sample
    model: str                        # "validated", "not validated", "none" (no model fitted)
    count: Encirclements | None       # clockwise turns on this contour (None: too few points)

    @property
    def samples(self) -> np.ndarray:
        """Indices of the points that are samples."""
        return np.flatnonzero(~self.from_model)

    def bridged(self) -> list[tuple[int, int]]:
        """(first, last) point indices of each stretch between two neighbouring samples that
        the model fills in, ends included (the samples either side)."""
        stretches, start = [], None
        for i, modelled in enumerate(self.from_model):
            if modelled and start is None:
                start = i - 1
            elif not modelled and start is not None:
                stretches.append((max(start, 0), i))
                start = None
        if start is not None:
            stretches.append((max(start, 0), len(self.from_model) - 1))
        return stretches

    def visible_bridges(self, drawn: np.ndarray, scale: float,
                        tolerance: float = 0.004) -> list[tuple[int, int]]:
        """The stretches of :meth:`bridged` where the model strays from the straight line
        between its two samples by more than ``tolerance`` × ``scale`` in the drawn coordinates
        ``drawn`` (the picture's transform of ``values``): where a polygon through the samples
        would look different."""
        found = []
        for a, b in self.bridged():
            start, end = drawn[a], drawn[b]
            inner = drawn[a + 1:b]
            chord = end - start
            if chord == 0:
                away = np.abs(inner - start)
            else:  # distance from the segment start–end
                t = np.clip(((inner - start) * np.conj(chord)).real / abs(chord) ** 2, 0, 1)
                away = np.abs(inner - (start + t * chord))
            if away.size and np.nanmax(away) > tolerance * scale:
                found.append((a, b))
        return found

    def closest_to_origin(self) -> tuple[complex, float, bool] | None:
        """(value, frequency, from the model) of the point nearest 0."""
        magnitude = np.abs(self.values)
        if not np.isfinite(magnitude).any():
            return None
        i = int(np.nanargmin(np.where(np.isfinite(magnitude), magnitude, np.nan)))
        return complex(self.values[i]), float(self.frequency_hz[i]), bool(self.from_model[i])


def _segment_counts(h: np.ndarray) -> np.ndarray:
    """Model points to add inside each segment (DRAW_STEP_DEG, DRAW_CHORD)."""
    turn = np.degrees(np.abs(np.diff(np.unwrap(np.angle(h)))))
    c = compress(h)
    radius = float(np.nanmax(np.abs(c))) if c.size else 1.0
    chord = np.abs(np.diff(c)) / max(radius, 1e-12)
    need = np.maximum(np.ceil(turn / DRAW_STEP_DEG), np.ceil(chord / DRAW_CHORD)) - 1
    need = np.clip(np.nan_to_num(need, nan=0.0), 0, MAX_PER_SEGMENT).astype(int)
    total = int(need.sum())
    if total > MAX_DRAWN_POINTS:  # keep the worst segments' share, scaled down
        need = np.floor(need * (MAX_DRAWN_POINTS / total)).astype(int)
    return need


def densify(frequency_hz: np.ndarray, h: np.ndarray, from_model: np.ndarray,
            model: RationalModel) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Add model points (log-spaced in frequency) inside segments that draw too coarsely."""
    need = _segment_counts(h)
    positive = (frequency_hz[:-1] > 0) & (frequency_hz[1:] > frequency_hz[:-1])
    need = np.where(positive, need, 0)
    if not need.any():
        return frequency_hz, h, from_model
    new = np.concatenate([
        np.geomspace(frequency_hz[i], frequency_hz[i + 1], n + 2)[1:-1]
        for i, n in enumerate(need) if n > 0])
    values = model(new)
    keep = np.isfinite(values) & (np.abs(values) > 0)
    f = np.concatenate([frequency_hz, new[keep]])
    order = np.argsort(f, kind="stable")
    return (f[order], np.concatenate([h, values[keep]])[order],
            np.concatenate([from_model, np.ones(int(keep.sum()), bool)])[order])


def drawn_contour(frequency_hz: np.ndarray, samples: np.ndarray, model: RationalModel | None,
                  refinement: Refinement | None) -> Contour:
    """The contour to draw from ``samples`` (finite, on increasing ``frequency_hz``), the
    engine's ``refinement`` of it when there is one, and more points of a validated ``model``."""
    f = np.asarray(frequency_hz, float)
    h = np.asarray(samples, complex)
    if refinement is not None:
        modelled = ~np.isin(refinement.frequency_hz, f)
        f, h = refinement.frequency_hz, refinement.ndf
    else:
        modelled = np.zeros(f.size, bool)
    state = "none" if model is None else "validated" if model.validated else "not validated"
    if model is not None and model.validated and f.size >= 2:
        f, h, modelled = densify(f, h, modelled, model)
    count = refinement.count if refinement is not None else (
        count_encirclements(f, h) if f.size >= 3 else None)
    return Contour(f, h, modelled, state, count)


def refined_response(frequency_hz: np.ndarray, h: np.ndarray, phase_step_limit_deg: float
                     ) -> tuple[RationalModel | None, Refinement | None]:
    """A validated model of one sampled response and its refined contour, as the engine makes
    them for NDF (``fit_response``, suspect intervals from the samples, ``refine_contour``);
    (None, None) when there are too few samples, (model, None) when it does not validate."""
    if frequency_hz.size < 8 or frequency_hz[-1] <= 0:
        return None, None
    try:
        model = fit_response(frequency_hz, h)
    except (ValueError, np.linalg.LinAlgError):
        return None, None
    if not model.validated:
        return model, None
    intervals = suspect_intervals(frequency_hz, h, phase_step_limit_deg)
    return model, refine_contour(frequency_hz, h, model, intervals, phase_step_limit_deg)
