"""What a flow's gate reads (JUnit messages): the next sweep of a verdict that is not final.

Oracle: the verdict contract (DEVELOPERS.md, "Verdict format"): ``next_sweep`` {``band_hz``,
``frequencies_hz``, ``reason``} is present exactly when the verdict is not final.
"""

from __future__ import annotations

from service.reports.outcomes import indeterminate_message, sweep_next_text, unstable_message


def _check(**verdict) -> dict:
    return {"verdict": {"verdict": "indeterminate", "diagnostics": [], "nodes": [], **verdict}}


def test_the_next_sweep_is_said_in_the_message():
    sweep = {"band_hz": [3e6, 1.2e11], "frequencies_hz": [1e9, 1.1e9], "reason": "..."}
    assert sweep_next_text({"next_sweep": sweep}) == "sweep next: 3 MHz to 120 GHz, 2 more points"
    assert indeterminate_message(_check(next_sweep=sweep)).endswith(
        "sweep next: 3 MHz to 120 GHz, 2 more points")
    dc = {"band_hz": [0.0, 1e10], "frequencies_hz": [], "reason": "..."}
    assert sweep_next_text({"next_sweep": dc}) == "sweep next: DC to 10 GHz"
    assert sweep_next_text({}) is None


def test_an_unstable_verdict_with_an_incomplete_count_says_so():
    mode = {"frequency_hz": 2e9, "pinned": True, "nodes": ["d"], "devices": ["Q1"]}
    item = {"unstable_count": 2, "first_unstable_frequency_hz": 2e9, "first_unstable_node": "d"}
    sweep = {"band_hz": [1e6, 4e10], "frequencies_hz": [], "reason": "..."}
    incomplete = unstable_message(item, _check(verdict="unstable", modes=[mode],
                                               next_sweep=sweep))
    assert "the count may be incomplete (sweep next: 1 MHz to 40 GHz)" in incomplete
    final = unstable_message(item, _check(verdict="unstable", modes=[mode]))
    assert "incomplete" not in final
