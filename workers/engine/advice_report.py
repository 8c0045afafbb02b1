"""What a designer acts on, as typed records of the verdict: the stability margin of every check
(``margin``) and the stabilisers computed on the data (``hints``). JSON via the verdict's
``to_dict`` (DEVELOPERS.md, "Verdict format"); fields are only ever added.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

Symmetry = Literal["odd", "even", "single"]  # how a mode drives a balanced pair of devices


@dataclass(frozen=True)
class NaturalFrequency:
    """One natural frequency s = σ + jω of the validated NDF model (a pair once, Im s ≥ 0).

    ``damping_ratio`` ζ = −σ/|s| (negative when it grows), ``q`` = 1/(2ζ); ``nodes`` ranked by
    the voltage shape |v_k| (``node_participation``, largest 1), ``devices`` by |gm ∂s/∂gm|.
    """

    frequency_hz: float
    growth_rate_per_s: float
    damping_ratio: float
    q: float | None
    nodes: list[str]
    devices: list[str]
    node_participation: list[float]
    symmetry: Symmetry | None = None


@dataclass(frozen=True)
class ClosestApproach:
    """How near a response comes to the origin: |value| at ``frequency_hz``; ``device``: the
    device whose return difference is smallest there (for NDF), or whose F_k it is."""

    value: float
    frequency_hz: float
    device: str | None


@dataclass(frozen=True)
class Margin:
    """The verdict's ``margin``: the three least-damped natural frequencies in the band, most
    lightly damped first (empty without a validated model whose zeros are trusted, ``note``
    says why), the closest approaches of NDF and of the return differences to 0, and the
    ``options.target_damping_ratio`` the check was judged against."""

    least_damped: list[NaturalFrequency]
    min_abs_ndf: ClosestApproach | None
    min_abs_return_difference: ClosestApproach | None
    note: str | None = None
    target_damping_ratio: float | None = None


@dataclass(frozen=True)
class InBandCost:
    """What a stabiliser costs where the amplifier is used: the change (with it minus without) of
    the external two-port's MSG/MAG and of |S21|, in dB, at the sample of the operating band
    where the change is largest in size; ``points``: samples of the band it was judged on."""

    band_hz: tuple[float, float]
    max_gain_change_db: float | None
    s21_change_db: float | None
    points: int


@dataclass(frozen=True)
class Stabiliser:
    """One suggested resistor: ``between`` [node, node] or [node, None] (to ground).

    ``resistance_ohm`` = 1/``conductance_s`` is the largest resistor (smallest conductance) at
    this placement that brings the count to 0 and the least-damped ζ up to the target
    (``meets_target``); when none does, the one that comes closest. ``achieved_damping_ratio``:
    the least-damped ζ in the band with it (None without a validated model);
    ``unstable_count_after``: the encirclement count of the samples with it.
    """

    between: list[str | None]
    resistance_ohm: float
    conductance_s: float
    achieved_damping_ratio: float | None
    meets_target: bool
    unstable_count_after: int
    least_damped_hz: float | None = None
    in_band_cost: InBandCost | None = None
