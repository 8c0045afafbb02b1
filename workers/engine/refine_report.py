"""The ``refinement`` block of the verdict as typed, frozen records (JSON via ``to_dict``).

Which parts are present depends on how far the refinement got: a model that could not be used
reports only ``points_added`` and ``model``; a used model adds the refined count; a model whose
zeros are trusted adds its right-half-plane zeros and, when there are modes, the node fits.
Absent parts are left out of the JSON (fields are only ever added within ``ballast.verdict/1``).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any, Literal


@dataclass(frozen=True)
class ModelSummary:
    """What the NDF model is and how well it validated (``workers.engine.models``)."""

    terms: int
    fit_error: float
    leave_out_error: float
    local_leave_out_error: float
    noise_floor: float
    validated: bool
    doublets_removed: int
    unmatched_zeros: int


@dataclass(frozen=True)
class IntervalReport:
    from_hz: float
    to_hz: float
    reasons: list[str]


@dataclass(frozen=True)
class CrossingReport:
    frequency_hz: float
    ndf_re: float
    direction: Literal["clockwise", "anticlockwise"]


@dataclass(frozen=True)
class ZeroReport:
    """A right-half-plane zero of the validated model inside the band, and whether the samples
    pin it down (``workers.engine.pinning``: margin over the model's error level)."""

    growth_rate_per_s: float
    frequency_hz: float
    pinned: bool
    pin_margin: float


@dataclass(frozen=True)
class KurokawaRefinedPoint:
    node: str
    frequency_hz: float
    re_admittance_s: float
    sampled_frequency_hz: float
    sampled_re_admittance_s: float


@dataclass(frozen=True)
class RefinementReport:
    """The verdict's ``refinement`` block (DEVELOPERS.md, "Verdict format")."""

    model: ModelSummary
    points_added: int = 0
    rounds: int | None = None
    count_before: int | None = None
    count_after: int | None = None
    counts_per_round: list[int] | None = None
    settled: bool | None = None
    max_phase_step_deg_after: float | None = None
    max_phase_step_at_hz_after: float | None = None
    intervals: list[IntervalReport] | None = None
    real_axis_crossings: list[CrossingReport] | None = None
    model_unstable_count: int | None = None
    rhp_zeros: list[ZeroReport] | None = None
    kurokawa_refined: list[KurokawaRefinedPoint] | None = None
    node_fit_error: dict[str, float] | None = None

    def to_dict(self) -> dict[str, Any]:
        """JSON types, absent parts left out (the model summary first, as before)."""
        body = asdict(self)
        return {key: value for key, value in body.items() if value is not None}
