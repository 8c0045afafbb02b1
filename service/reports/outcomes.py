"""A check's outcome in one line: the state a row shows, the process exit code of a set of checks,
and the message a CI report gives for a check that is not stable (no plotting imports).

Rows are the API's batch listing items (GET /v1/batches/{id}/checks): id, label, status, verdict,
unstable_count, first_unstable_frequency_hz, first_unstable_node. :func:`item_from_check` makes the
same row from a full check (GET /v1/checks/{id}).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from service.reports.check_rows import hint_text
from service.reports.units import format_hz
from service.reports.wording import count_in_words

EXIT_STABLE, EXIT_UNSTABLE, EXIT_INDETERMINATE, EXIT_ERROR = 0, 1, 2, 3


def state_of(item: Mapping[str, Any]) -> str:
    """The verdict of a finished check, else its status (queued, running, failed, cancelled)."""
    status = item.get("status")
    verdict = item.get("verdict")
    if isinstance(verdict, dict):
        verdict = verdict.get("verdict")
    return str(verdict) if status == "done" and verdict else str(status or "unknown")


def exit_code(items: Iterable[Mapping[str, Any]]) -> int:
    """1 if any check is unstable (a definite oscillation outranks everything); else 3 if any
    failed, was cancelled or has not finished; else 2 if any is indeterminate; else 0."""
    states = {state_of(item) for item in items}
    if "unstable" in states:
        return EXIT_UNSTABLE
    if states & {"failed", "cancelled", "queued", "running", "unknown"}:
        return EXIT_ERROR
    if "indeterminate" in states:
        return EXIT_INDETERMINATE
    return EXIT_STABLE


def item_from_check(check: Mapping[str, Any]) -> dict[str, Any]:
    """A listing row from a full check: the lowest-frequency mode and its strongest node."""
    verdict = check.get("verdict") or {}
    modes = _counted_modes(verdict)
    first = min(modes, key=lambda m: m["frequency_hz"]) if modes else None
    return {
        "id": check.get("id"),
        "label": check.get("label"),
        "status": check.get("status"),
        "verdict": verdict.get("verdict"),
        "unstable_count": verdict.get("unstable_count"),
        "first_unstable_frequency_hz": first["frequency_hz"] if first else None,
        "first_unstable_node": (first.get("nodes") or [None])[0] if first else None,
    }


def _counted_modes(verdict: Mapping[str, Any]) -> list[Mapping[str, Any]]:
    """The modes the verdict counts (pinned down by the samples), with a frequency."""
    return [m for m in verdict.get("modes") or []
            if isinstance(m.get("frequency_hz"), int | float) and m.get("pinned", True)]


def _leverage_node(mode: Mapping[str, Any]) -> str | None:
    """The node where a part moves the mode most (largest node_leverage)."""
    nodes, leverage = mode.get("nodes") or [], mode.get("node_leverage") or []
    pairs = [(w, n) for n, w in zip(nodes, leverage, strict=False) if isinstance(w, int | float)]
    return max(pairs)[1] if pairs else None


def _first_kurokawa(verdict: Mapping[str, Any]) -> tuple[float, str] | None:
    """The lowest-frequency Kurokawa point over all nodes, as (frequency, node)."""
    points = [(p["frequency_hz"], node["name"]) for node in verdict.get("nodes") or []
              for p in node.get("kurokawa") or [] if p.get("frequency_hz") is not None]
    return min(points) if points else None


def _diagnostic_frequency(diagnostic: Mapping[str, Any]) -> float | None:
    details = diagnostic.get("details") or {}
    for key in ("frequency_hz", "at_hz"):
        value = details.get(key)
        if isinstance(value, int | float):
            return float(value)
    return None


def unstable_message(item: Mapping[str, Any], check: Mapping[str, Any] | None) -> str:
    """'oscillates: one oscillating pair (2 right-half-plane natural frequencies); first at
    146.1 MHz, node d2 (Q1); most leverage at node g1': the node where the mode shows most and,
    when another, the node where a part moves it most."""
    count = item.get("unstable_count")
    verdict = (check or {}).get("verdict") or {}
    modes = sorted(_counted_modes(verdict), key=lambda m: m["frequency_hz"])
    devices = f" ({', '.join(modes[0].get('devices') or [])})" if modes and modes[0].get(
        "devices") else ""
    said = (f"{count_in_words(count, modes)} ({count} right-half-plane natural "
            f"frequenc{'y' if count == 1 else 'ies'})" if isinstance(count, int) and modes
            else f"{count if count is not None else '?'} right-half-plane natural frequencies")
    shown = item.get("first_unstable_node") or "?"
    lever = _leverage_node(modes[0]) if modes else None
    leverage = f"; most leverage at node {lever}" if lever and lever != shown else ""
    sweep = sweep_next_text(verdict)
    incomplete = f"; the count may be incomplete ({sweep})" if sweep else ""
    return (f"oscillates: {said}; first at {format_hz(item.get('first_unstable_frequency_hz'))}, "
            f"node {shown}{devices}{leverage}{incomplete}")


def indeterminate_message(check: Mapping[str, Any] | None) -> str:
    """The first blocking diagnostic, with its frequency, and the first Kurokawa node if any."""
    verdict = (check or {}).get("verdict") or {}
    diagnostics = verdict.get("diagnostics") or []
    blocking = [d for d in diagnostics if d.get("severity") == "blocking"] or diagnostics
    parts = ["no trusted verdict"]
    if blocking:
        first = blocking[0]
        parts = [f"no trusted verdict: {first.get('code')}: {first.get('message')}"]
        freq = _diagnostic_frequency(first)
        if freq is not None:
            parts.append(f"at {format_hz(freq)}")
    kurokawa = _first_kurokawa(verdict)
    if kurokawa:
        parts.append(f"Kurokawa point at {format_hz(kurokawa[0])}, node {kurokawa[1]}")
    else:
        parts.append("no node singled out")
    sweep = sweep_next_text(verdict)
    if sweep:
        parts.append(sweep)
    return "; ".join(parts)


def sweep_next_text(verdict: Mapping[str, Any]) -> str | None:
    """'sweep next: 3 MHz to 120 GHz, 11 more points' from the verdict's ``next_sweep``."""
    sweep = verdict.get("next_sweep")
    if not isinstance(sweep, Mapping):
        return None
    band = sweep.get("band_hz") or [None, None]
    low = "DC" if band[0] == 0 else format_hz(band[0])
    points = len(sweep.get("frequencies_hz") or [])
    more = f", {points} more point{'s' if points != 1 else ''}" if points else ""
    return f"sweep next: {low} to {format_hz(band[1])}{more}"


def failed_message(check: Mapping[str, Any] | None) -> str:
    reason = (check or {}).get("reason")
    return f"check failed: {reason}" if reason else "check failed (no reason given)"


def details_text(item: Mapping[str, Any], check: Mapping[str, Any] | None) -> str:
    """Several lines for a CI report body: each mode and each diagnostic."""
    verdict = (check or {}).get("verdict") or {}
    lines = [f"check {item.get('id')} ({item.get('label') or 'no label'}): {state_of(item)}"]
    for mode in verdict.get("modes") or []:
        hints = [h for h in mode.get("hints") or [] if isinstance(h, Mapping)]
        hint = hints[0] if hints else mode.get("hint") or {}
        lines.append(
            f"  mode at {format_hz(mode.get('frequency_hz'))}: nodes "
            f"{', '.join((mode.get('nodes') or [])[:4])}; devices "
            f"{', '.join(mode.get('devices') or [])}"
            + (f"; damping to try: {hint_text(hint)}" if hint else ""))
    for diag in verdict.get("diagnostics") or []:
        lines.append(f"  [{diag.get('severity')}] {diag.get('code')}: {diag.get('message')}")
    if check and check.get("reason"):
        lines.append(f"  reason: {check['reason']}")
    return "\n".join(lines)
