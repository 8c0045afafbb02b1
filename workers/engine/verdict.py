"""The verdict: typed results of one check and their JSON form (format ``ballast.verdict/1``).

The service returns exactly :meth:`CheckVerdict.to_dict`; the format is documented in
DEVELOPERS.md ("Verdict format"). Fields are only ever added within a format version.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, replace
from typing import Any, Literal, TypedDict

from workers.engine.advice_report import Margin, Stabiliser, Symmetry
from workers.engine.edges import EdgeBasis
from workers.engine.refine_report import RefinementReport

VERDICT_FORMAT = "ballast.verdict/1"

VerdictName = Literal["stable", "unstable", "indeterminate"]
Severity = Literal["info", "warning", "blocking"]
PortRole = Literal["external", "probe"]
ModeEstimate = Literal[  # how a mode's frequency was found
    "ndf_phase_drop", "ndf_real_axis", "kurokawa_point", "rational_model"]
DiagnosticCode = Literal[
    "band_low_open",            # NDF has not settled to its DC value at the lowest frequency
    "band_high_open",           # NDF has not settled to its limit at the highest frequency
    "phase_step_too_large",     # NDF turns too far between neighbouring samples
    "count_not_integer",        # the closed phase change is far from a whole number of π
    "singular_points",          # Y singular at some frequencies (dropped from the contour)
    "gain_off_mismatch",        # gain_off data and the devices' stamps disagree
    "product_mismatch",         # Π F_k differs from det Y_on / det Y_off
    "kurokawa_unexplained",     # a node meets Kurokawa's condition but the count says stable
    "marginal_response",        # NDF passes very close to the origin
    "asymptote_not_unity",      # NDF settles to a real value other than 1 at the top
    "two_port_unavailable",     # not exactly two external ports, or Z_ext singular
    "model_not_validated",      # the rational model failed its leave-out check
    "model_count_disagrees",    # model's right-half-plane zeros ≠ refined encirclement count
    "not_rational",             # the data is not rational over the band (delay): model not trusted
    "refinement_added_points",  # the refinement evaluated the model between samples
    "mode_not_pinned",          # a model zero in the right half-plane that the samples cannot
                                # tell from its mirror image (more points needed around it)
    "touchstone_comment_references",  # per-port references named only in Touchstone comments
]

AssumptionCode = Literal[
    "dc_asymptote",             # the DC end closed along NDF's low-frequency asymptote
    "top_share_decay",          # the top end closed by the devices' falling share |NDF − 1|
    "no_gain_above_fmax",       # the top end closed on the flow's f_max statement
]


def _clean(value: Any) -> Any:
    """JSON-safe copy: non-finite floats become None, tuples become lists."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_clean(v) for v in value]
    return value


@dataclass(frozen=True)
class Diagnostic:
    """Something that limited confidence; ``blocking`` ones make the verdict indeterminate."""

    code: DiagnosticCode
    severity: Severity
    message: str
    details: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class StabilisationHint:
    """A resistor for a mode: the best stabiliser computed on the data (``between`` its two
    nodes, the second None for ground; ``advice``), or, without one, the first-order shunt
    conductance that cancels Re Y at the node. A starting point to re-check, not a fix."""

    node: str
    frequency_hz: float
    shunt_conductance_s: float
    shunt_resistance_ohm: float
    note: str = ("first-order estimate from the driving-point admittance at the mode frequency; "
                 "re-check the circuit with the part added")
    between: list[str | None] | None = None  # [node, node or None]: the part's placement


@dataclass(frozen=True)
class Mode:
    """One unstable natural frequency (a complex pair counts once here and twice in the count).

    ``nodes`` are ranked by the mode's voltage shape |v_k| (``node_participation``, largest 1);
    ``node_leverage`` (same order) is the diagonal residue |v_k·w_k| of Z_kk, how far a shunt at
    that node moves the mode; ``devices`` are the devices whose transconductance the mode depends
    on (``device_participation``, |gm_k ∂s/∂gm_k| relative to the largest), most first.
    ``pinned``: the samples themselves place it in the right half-plane (``pinning``), so it is
    counted; an unpinned one is reported only. ``symmetry``: odd, even or single from the
    phases of its voltage shape (``symmetry``); ``hints``: the best stabilisers for it
    (``stabilisers``), whose first fills ``hint``.
    """

    frequency_hz: float
    growth_rate_per_s: float | None
    nodes: list[str]
    devices: list[str]
    node_participation: list[float]
    estimated_by: ModeEstimate
    hint: StabilisationHint | None = None
    pinned: bool = True
    node_leverage: list[float] | None = None
    device_participation: list[float] | None = None
    symmetry: Symmetry | None = None  # from the phases of the voltage shape (``symmetry``)
    hints: list[Stabiliser] | None = None  # the best stabilisers for it (``advice``)


@dataclass(frozen=True)
class Assumption:
    """Something the verdict rests on that the samples alone do not show."""

    code: AssumptionCode
    message: str


@dataclass(frozen=True)
class NextSweep:
    """What to sample next for a final verdict: the band that would settle the open edges
    (a low end of 0 means "include DC"), extra points where the samples are too sparse, why."""

    band_hz: tuple[float, float]
    frequencies_hz: list[float]
    reason: str


@dataclass(frozen=True)
class EdgeReport:
    """One band edge of NDF: its value, the older closure measures (distance, drift, trend) and
    the judgement of ``workers.engine.edges`` (settled, on what basis, the share |NDF − 1|, the
    top's fitted slope, the DC end's asymptote spread, and why)."""

    frequency_hz: float
    ndf_re: float
    ndf_im: float
    distance: float
    off_axis: float
    drift: float
    trend: float | None = None
    settled: bool | None = None
    basis: EdgeBasis | None = None
    share: float | None = None
    slope: float | None = None
    spread: float | None = None
    reason: str | None = None


@dataclass(frozen=True)
class NdfReport:
    encirclements_clockwise: int
    residual: float
    low_edge: EdgeReport
    high_edge: EdgeReport
    max_phase_step_deg: float
    max_phase_step_at_hz: float
    min_abs: float
    min_abs_at_hz: float
    trusted: bool


@dataclass(frozen=True)
class DeviceReport:
    name: str
    order: int
    encirclements_clockwise: int | None
    min_abs_return_difference: float
    min_at_hz: float
    fmax_hz: float | None = None
    count_note: str | None = None  # why encirclements_clockwise is null


@dataclass(frozen=True)
class KurokawaPoint:
    frequency_hz: float
    re_admittance_s: float
    im_slope_s_per_hz: float
    growth_estimate_per_s: float


@dataclass(frozen=True)
class NodeReport:
    name: str
    role: PortRole
    min_re_admittance_s: float
    min_re_at_hz: float
    kurokawa: list[KurokawaPoint]


@dataclass(frozen=True)
class MethodReport:
    """What one method says about the number of right-half-plane natural frequencies."""

    method: Literal["encirclement", "rational_model", "kurokawa"]
    unstable_count: int | None
    agrees: bool | None
    note: str = ""


class TwoPortReport(TypedDict):
    """The verdict's ``two_port``: the external ports and ``TwoPortSummary.to_dict``
    (``workers.engine.twoport``; minima null when no sample defines them)."""

    ports: list[str]
    k_min: float | None
    k_min_hz: float | None
    mu_min: float | None
    mu_min_hz: float | None
    mu_prime_min: float | None
    mu_prime_min_hz: float | None
    unstable_bands_hz: list[tuple[float, float]]
    unconditionally_stable: bool
    proviso: str


@dataclass(frozen=True)
class CheckVerdict:
    verdict: VerdictName
    unstable_count: int | None
    modes: list[Mode]
    ndf: NdfReport | None
    devices: list[DeviceReport]
    nodes: list[NodeReport]
    two_port: TwoPortReport | None
    methods: list[MethodReport]
    diagnostics: list[Diagnostic]
    band_hz: tuple[float, float]
    n_points: int
    n_ports: int
    refinement: RefinementReport | None = None
    count_complete: bool = False
    assumptions: list[Assumption] = field(default_factory=list)
    next_sweep: NextSweep | None = None
    margin: Margin | None = None  # set by ``advice``
    hints: list[Stabiliser] = field(default_factory=list)  # best first

    def to_dict(self) -> dict[str, Any]:
        refinement = self.refinement
        body = asdict(replace(self, refinement=None))
        body["band_hz"] = list(self.band_hz)
        body["refinement"] = None if refinement is None else refinement.to_dict()
        if self.next_sweep is None:
            del body["next_sweep"]
        else:
            body["next_sweep"]["band_hz"] = list(self.next_sweep.band_hz)
        return {"format": VERDICT_FORMAT, **_clean(body)}
