"""Why a device's count is missing from the verdict, in words (no plotting imports).

The verdict gives each device's clockwise encirclements of its return difference F_k only when
the count on the samples can stand for the whole axis: the engine's ``count_trusted`` (the same
rules as for NDF: both band edges settled, no phase step beyond the limit, a whole number of
turns). The verdict's ``count_note`` says it in the engine's words; the report asks the engine's
analysis again to say it rule by rule, sampling problems first.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from service.reports.units import format_hz, format_number
from workers.engine.check import Analysis, BandEdges, count_trusted
from workers.engine.encirclement import Encirclements
from workers.engine.request import CheckRequest
from workers.engine.verdict import Diagnostic

MISSING_IN_VERDICT = "the verdict does not say why"


def _doubt(diagnostic: Diagnostic, limit_deg: float) -> str:
    """One failed rule, said of F_k (codes of ``workers.engine.check.count_trusted``)."""
    d = diagnostic.details or {}
    code = diagnostic.code
    if code == "phase_step_too_large":
        return (f"it turns {format_number(d.get('step_deg'), 3)}° between two samples near "
                f"{format_hz(d.get('at_hz'))} (limit {format_number(limit_deg, 3)}°): too few "
                "samples there to count its turns")
    if code in ("band_low_open", "band_high_open"):
        return diagnostic.message.replace("NDF", "F_k")  # the edge rule's own reason
    if code == "count_not_integer":
        return (f"its phase change is {format_number(d.get('residual_half_turns'), 2)} "
                "half-turns away from a whole number")
    return diagnostic.message  # a rule added to the engine later: its own words


def count_note(count: Encirclements | None, request: CheckRequest,
               edges: BandEdges | None = None) -> str | None:
    """Why the count of one F_k is not given (None when it can be trusted); the sampling
    problems first, then the band edges."""
    if count is None:
        return "F_k is finite and non-zero at fewer than three frequencies, so it has no count"
    doubts = count_trusted(count, request, edges)
    if not doubts:
        return None
    doubts.sort(key=lambda d: d.code.startswith("band_"))
    return "; ".join(_doubt(d, request.options.phase_step_limit_deg) for d in doubts)


def device_notes(analysis: Analysis, verdict: Mapping[str, Any]) -> dict[str, str]:
    """{device name: why its count is null} for every device whose verdict count is null."""
    notes = {}
    names = [d.name for d in analysis.request.devices]
    for report in verdict.get("devices") or []:
        name = report.get("name")
        if report.get("encirclements_clockwise") is not None or name not in names:
            continue
        k = names.index(name)
        count = analysis.device_counts[k] if k < len(analysis.device_counts) else None
        edges = analysis.device_edges[k] if k < len(analysis.device_edges) else None
        notes[name] = count_note(count, analysis.request, edges) or MISSING_IN_VERDICT
    return notes


def needs_notes(verdict: Mapping[str, Any]) -> bool:
    """True when some device of ``verdict`` has a null count."""
    return any(d.get("encirclements_clockwise") is None for d in verdict.get("devices") or [])
