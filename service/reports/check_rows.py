"""The rows and facts of a check page, in words and engineering notation (no plotting imports).

Everything is read from the verdict JSON with ``.get``: fields added to ``ballast.verdict/1``
later (``margin``, ``hints``, per-mode ``hints`` and ``symmetry`` from issue 12; ``count_complete``,
``assumptions``, ``next_sweep``, ``devices[].fmax_hz`` and the per-mode flag ``PINNED_KEY`` from
issue 14) show when present and are simply absent from the page otherwise.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from service.reports.devices import MISSING_IN_VERDICT
from service.reports.units import (
    format_hz,
    format_near_one,
    format_number,
    format_ohm,
    format_power_of_ten,
    format_seconds,
    format_share,
    format_siemens,
)
from service.reports.wording import count_in_words, mode_timing

#: the per-mode boolean (issue 14) saying whether the data pin the mode down
PINNED_KEY = "pinned"
PER_SECOND = "s⁻¹"
NO_CHANGE_DB = 0.005  # in-band changes below this (dB) read "no change"


def _number_list(values: Sequence[Any] | None) -> list[Any]:
    return [v for v in values or [] if isinstance(v, int | float)]


def growth_cells(frequency_hz: Any, growth: Any) -> dict[str, str]:
    """σ, Q and doubling (or halving) time of one natural frequency, as table cells."""
    timing = mode_timing(frequency_hz, growth)
    cells = {"growth": format_power_of_ten(growth, PER_SECOND), "zeta": "–", "q": "–",
             "doubling": "–"}
    if timing is None:
        return cells
    verb = "doubles" if timing.growing else "halves"
    cycles = f" ({format_number(timing.cycles, 3)} cycles)" if timing.cycles else ""
    cells.update(zeta=format_number(timing.damping_ratio, 3), q=format_number(timing.q, 3),
                 doubling=f"{verb} every {format_seconds(timing.doubling_time_s)}{cycles}")
    return cells


def _nodes_with_shares(names: Sequence[str], shares: Sequence[Any], limit: int = 4) -> str:
    shown = []
    for i, name in enumerate(list(names)[:limit]):
        share = shares[i] if i < len(shares) and isinstance(shares[i], int | float) else None
        shown.append(f"{name} ({format_share(share)})" if share is not None else str(name))
    return ", ".join(shown) or "–"


def _placement(hint: Mapping[str, Any]) -> str:
    between = hint.get("between")
    if isinstance(between, list | tuple) and between:
        return (f"between {between[0]} and {between[1]}" if len(between) > 1
                and between[1] is not None else f"from {between[0]} to ground")
    return f"shunt at {hint.get('node') or '?'}"


def cost_text(cost: Any) -> str:
    """The in-band cost of a stabiliser: "MSG/MAG −0.31 dB, |S21| −0.18 dB in 4 GHz – 6 GHz"."""
    if not isinstance(cost, Mapping):
        return ""
    changes = {label: cost.get(key) for key, label in (("max_gain_change_db", "MSG/MAG"),
                                                       ("s21_change_db", "|S21|"))
               if isinstance(cost.get(key), int | float)}
    band = cost.get("band_hz")
    where = (f" in {format_hz(band[0])} – {format_hz(band[1])}"
             if isinstance(band, list | tuple) and len(band) == 2 else "")
    if not changes:
        return ""
    if all(abs(v) < NO_CHANGE_DB for v in changes.values()):
        return "no change" + where
    return ", ".join(f"{label} {format_number(v, 2)} dB" for label, v in changes.items()) + where


def hint_text(hint: Mapping[str, Any]) -> str:
    """One damping suggestion: the first-order ``hint`` or an entry of ``hints``."""
    resistance = hint.get("resistance_ohm", hint.get("shunt_resistance_ohm"))
    text = f"{format_ohm(resistance)} {_placement(hint)}"
    achieved = hint.get("achieved_damping_ratio")
    if isinstance(achieved, int | float):
        text += f" (ζ → {format_number(achieved, 2)}"
        text += ")" if hint.get("meets_target", True) else ", short of the target)"
    cost = cost_text(hint.get("in_band_cost"))
    if cost:
        text += f"; {cost}"
    return text


def hint_rows(verdict: Mapping[str, Any]) -> list[dict[str, str]]:
    """The verdict's ``hints`` (issue 12): placement, resistor, ζ with it, count, in-band cost."""
    rows = []
    for hint in verdict.get("hints") or []:
        if not isinstance(hint, Mapping):
            continue
        achieved = hint.get("achieved_damping_ratio")
        count = hint.get("unstable_count_after")
        rows.append({
            "where": _placement(hint),
            "resistor": format_ohm(hint.get("resistance_ohm")),
            "zeta": format_number(achieved, 3) if isinstance(achieved, int | float) else "–",
            "least": format_hz(hint.get("least_damped_hz")),
            "meets": "yes" if hint.get("meets_target") else "no",
            "count": "–" if not isinstance(count, int) or count < 0 else
            count_in_words(count, []),
            "cost": cost_text(hint.get("in_band_cost")) or "–",
        })
    return rows


def mode_rows(verdict: Mapping[str, Any]) -> list[dict[str, str]]:
    rows = []
    for mode in verdict.get("modes") or []:
        hints = [h for h in mode.get("hints") or [] if isinstance(h, Mapping)]
        hint = mode.get("hint") or {}
        damping = hint_text(hints[0]) if hints else (hint_text(hint) if hint else "–")
        pinned = mode.get(PINNED_KEY)
        rows.append({
            "frequency": format_hz(mode.get("frequency_hz")),
            **growth_cells(mode.get("frequency_hz"), mode.get("growth_rate_per_s")),
            "nodes": _nodes_with_shares(mode.get("nodes") or [],
                                        mode.get("node_participation") or []),
            "devices": ", ".join(mode.get("devices") or []) or "–",
            "symmetry": str(mode.get("symmetry") or ""),
            "by": str(mode.get("estimated_by") or "–").replace("_", " "),
            "pinned": "" if pinned is None else ("yes" if pinned else "no"),
            "hint": damping,
        })
    return rows


def has_column(rows: Sequence[Mapping[str, str]], key: str) -> bool:
    return any(row.get(key) for row in rows)


def device_rows(verdict: Mapping[str, Any], notes: Mapping[str, str] | None
                ) -> list[dict[str, str]]:
    """Per device: count in words, min |F_k| and where, and why a null count is null."""
    modes = verdict.get("modes") or []
    rows = []
    for device in verdict.get("devices") or []:
        name = str(device.get("name"))
        count = device.get("encirclements_clockwise")
        own = [m for m in modes if name in (m.get("devices") or [])]
        if count is None:
            said = "–"
            why = (notes or {}).get(name) or MISSING_IN_VERDICT
        else:
            said = count_in_words(count, own) + (f" ({count})" if count else "")
            why = ""
        rows.append({
            "name": name, "order": str(device.get("order", "–")), "count": said,
            "min": format_number(device.get("min_abs_return_difference"), 3),
            "at": format_hz(device.get("min_at_hz")), "why": why,
            "fmax": format_hz(device.get("fmax_hz")) if device.get("fmax_hz") else "",
        })
    return rows


def node_rows(verdict: Mapping[str, Any]) -> list[dict[str, str]]:
    rows = []
    for node in verdict.get("nodes") or []:
        points = node.get("kurokawa") or []
        rows.append({
            "name": node.get("name"), "role": node.get("role"),
            "min_re": format_siemens(node.get("min_re_admittance_s")),
            "at": format_hz(node.get("min_re_at_hz")),
            "kurokawa": ", ".join(format_hz(p.get("frequency_hz")) for p in points) or "–",
        })
    return rows


def two_port_block(verdict: Mapping[str, Any]) -> dict[str, Any] | None:
    tp = verdict.get("two_port")
    if not tp:
        return None
    bands = tp.get("unstable_bands_hz") or []
    return {
        "ports": " → ".join(tp.get("ports") or []),
        "facts": [
            ("lowest K", f"{format_near_one(tp.get('k_min'), 'K')} at "
                         f"{format_hz(tp.get('k_min_hz'))}"),
            ("lowest μ (load side)", f"{format_near_one(tp.get('mu_min'), 'μ')} at "
                                     f"{format_hz(tp.get('mu_min_hz'))}"),
            ("lowest μ′ (source side)", f"{format_near_one(tp.get('mu_prime_min'), 'μ′')} at "
                                        f"{format_hz(tp.get('mu_prime_min_hz'))}"),
            ("bands with μ < 1", "; ".join(f"{format_hz(lo)} – {format_hz(hi)}"
                                          for lo, hi in bands) or "none"),
            ("unconditionally stable ports", "yes" if tp.get("unconditionally_stable") else "no"),
        ],
        "proviso": tp.get("proviso") or "",
    }


def margin_block(verdict: Mapping[str, Any]) -> dict[str, Any] | None:
    """The ``margin`` object (issue 12): least-damped natural frequencies and closest approaches."""
    margin = verdict.get("margin")
    if not isinstance(margin, Mapping):
        return None
    rows = []
    for entry in margin.get("least_damped") or []:
        cells = growth_cells(entry.get("frequency_hz"), entry.get("growth_rate_per_s"))
        if isinstance(entry.get("damping_ratio"), int | float):
            cells["zeta"] = format_number(entry["damping_ratio"], 3)
        if isinstance(entry.get("q"), int | float):
            cells["q"] = format_number(entry["q"], 3)
        rows.append({"frequency": format_hz(entry.get("frequency_hz")), **cells,
                     "nodes": _nodes_with_shares(entry.get("nodes") or [],
                                                 entry.get("node_participation") or []),
                     "devices": ", ".join(entry.get("devices") or []) or "–",
                     "symmetry": str(entry.get("symmetry") or "")})
    facts = []
    for key, label in (("min_abs_ndf", "closest |NDF|"),
                       ("min_abs_return_difference", "closest |F_k|")):
        entry = margin.get(key)
        if isinstance(entry, Mapping):
            where = f" at {format_hz(entry.get('frequency_hz'))}"
            device = f" ({entry['device']})" if entry.get("device") else ""
            facts.append((label, f"{format_number(entry.get('value'), 3)}{where}{device}"))
    target = margin.get("target_damping_ratio")
    if isinstance(target, int | float):
        facts.append(("target damping ratio ζ", format_number(target, 3)))
    note = str(margin.get("note") or "")
    return {"rows": rows, "facts": facts, "note": note} if rows or facts or note else None


def next_sweep_block(verdict: Mapping[str, Any]) -> dict[str, str] | None:
    """``next_sweep`` (issue 14): the band and extra points that would settle the verdict."""
    sweep = verdict.get("next_sweep")
    if not isinstance(sweep, Mapping):
        return None
    band = _number_list(sweep.get("band_hz"))
    points = _number_list(sweep.get("frequencies_hz"))
    shown = ", ".join(format_hz(f) for f in points[:8]) + (" …" if len(points) > 8 else "")
    return {
        "band": (f"{'0 Hz (include DC)' if band[0] == 0 else format_hz(band[0])} – "
                 f"{format_hz(band[1])}" if len(band) == 2 else "–"),
        "points": f"{len(points)} extra frequencies" + (f": {shown}" if points else ""),
        "reason": str(sweep.get("reason") or ""),
    }


def assumption_rows(verdict: Mapping[str, Any]) -> list[dict[str, str]]:
    return [{"code": str(a.get("code") or ""), "message": str(a.get("message") or "")}
            for a in verdict.get("assumptions") or [] if isinstance(a, Mapping)]


def count_fact(verdict: Mapping[str, Any]) -> str:
    """The count in words, with the number: "one oscillating pair (2)"."""
    count = verdict.get("unstable_count")
    complete = verdict.get("count_complete")
    words = count_in_words(count, verdict.get("modes") or [],
                           complete if isinstance(complete, bool) else None)
    return words if count in (None, 0) else f"{words} ({count})"
