"""The check page's HTML, read back with html.parser (the HTML Living Standard's tokeniser rules,
as Python's standard library implements them): the device table and why a count is missing,
modes with Q and doubling time, μ − 1, and the verdict fields added later (read with .get).
"""

from __future__ import annotations

import copy
import math
import re
from html.parser import HTMLParser

import numpy as np
import pytest

from service.reports import pages
from service.reports.check_rows import PINNED_KEY
from service.reports.data import request_device_notes
from service.reports.devices import MISSING_IN_VERDICT
from service.reports.units import format_number, format_ohm, format_power_of_ten, format_seconds
from service.runner import run_check_json
from workers.lumped.families import combined_power_stage, two_stage_lna


class _StyleText(HTMLParser):
    """The raw text of every <style> element (the HTML standard: style content is raw text, so
    character references are *not* decoded there)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=False)
        self.text = ""
        self._inside = False

    def handle_starttag(self, tag, attrs):
        self._inside = tag == "style"

    def handle_endtag(self, tag):
        self._inside = False

    def handle_data(self, data):
        if self._inside:
            self.text += data


def test_style_sheet_is_not_html_escaped():
    """Inside <style> "&#34;" stays literal, which breaks the font stack and the sort arrows."""
    parser = _StyleText()
    parser.feed(pages.check_page({"id": "chk_x", "status": "queued"}))
    assert '"DejaVu Sans"' in parser.text and "&#34;" not in parser.text
    parser = _StyleText()
    parser.feed(pages.batch_page({"id": "bat_x"}, [], lambda item: None))
    assert 'content:" \\2195"' in parser.text


# --- the check page of real circuits ------------------------------------------------------------
# The combined power stage without its drain-to-drain resistor: an odd mode at +102 MHz ± j2242 MHz
# (scipy.linalg.eig on the MNA pencil, workers.lumped.families.combined_power_stage); the LNA
# without its gate-return damping: a pair near 145 MHz. 301 log-spaced points from 1 MHz to
# 1 THz, coarse enough that some device counts cannot be trusted on the samples.

BAND_HZ = np.geomspace(1e6, 1e12, 301)


@pytest.fixture(scope="module")
def checks():
    out = {}
    for name, case in (("pa", combined_power_stage(odd_mode_ohm=None)),
                       ("pa_stable", combined_power_stage()),
                       ("lna", two_stage_lna(gate_return_damping_ohm=None))):
        request = case.check_request(BAND_HZ)
        verdict = run_check_json(request)
        out[name] = (case, request, {"id": f"chk_{name}", "label": name, "status": "done",
                                     "verdict": verdict, "attempts": 1})
    return out


class _Table(HTMLParser):
    """Rows (lists of cell texts) of the table with the given id."""

    def __init__(self, table_id: str) -> None:
        super().__init__()
        self.table_id, self.rows, self._depth, self._cell = table_id, [], 0, None

    def handle_starttag(self, tag, attrs):
        if tag == "table" and dict(attrs).get("id") == self.table_id:
            self._depth = 1
        elif self._depth and tag == "tr":
            self.rows.append([])
        elif self._depth and tag in ("td", "th"):
            self._cell = ""

    def handle_endtag(self, tag):
        if tag == "table":
            self._depth = 0
        elif self._depth and tag in ("td", "th") and self._cell is not None:
            self.rows[-1].append(self._cell.strip())
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell += data


def table(html: str, table_id: str) -> list[dict[str, str]]:
    parser = _Table(table_id)
    parser.feed(html)
    header, *body = parser.rows
    return [dict(zip(header, row, strict=True)) for row in body]


def test_device_table_says_why_a_count_is_missing(checks):
    case, request, check = checks["pa"]
    verdict = check["verdict"]
    missing = [d["name"] for d in verdict["devices"] if d["encirclements_clockwise"] is None]
    assert missing  # this coarse grid leaves some device counts untrusted
    notes = request_device_notes(request, verdict)
    assert set(notes) == set(missing)
    rows = {r["device"]: r for r in table(pages.check_page(check, device_notes=notes), "devices")}
    for name in missing:
        assert rows[name]["adds"] == "–" and rows[name]["why no count"] == notes[name]
        assert rows[name]["why no count"] not in ("", MISSING_IN_VERDICT)
    # the odd mode turns F fast between samples: the note names a step near its frequency
    odd_hz = case.natural_frequencies()
    odd_hz = odd_hz[(odd_hz.real > 0) & (odd_hz.imag > 0)][0].imag / (2 * np.pi)
    stepped = [n for n in notes.values() if n.startswith("it turns")]
    assert stepped
    named = re.search(r"near ([0-9.]+) GHz", stepped[0])
    assert named and float(named.group(1)) * 1e9 == pytest.approx(odd_hz, rel=0.1)
    for row in rows.values():
        assert re.fullmatch(r"[0-9.]+ (kHz|MHz|GHz|THz)", row["at"])
    # without notes the page still says that the verdict gives no reason
    bare = {r["device"]: r for r in table(pages.check_page(check), "devices")}
    assert bare[missing[0]]["why no count"] == MISSING_IN_VERDICT


def test_modes_are_said_with_q_and_doubling_time(checks):
    _, _, check = checks["lna"]
    mode = check["verdict"]["modes"][0]
    sigma, f = mode["growth_rate_per_s"], mode["frequency_hz"]
    html = pages.check_page(check)
    row = table(html, "modes")[0]
    # by hand: Q = −|s|/(2σ), doubling time ln 2/σ (e^{σt}), engineering notation
    q = -abs(complex(sigma, 2 * np.pi * f)) / (2 * sigma)
    assert row["Q"] == f"{q:.3g}".replace("-", "−")
    assert row["envelope"].startswith(f"doubles every {format_seconds(math.log(2) / sigma)}")
    assert row["growth σ"].endswith("× 10⁶ s⁻¹")
    assert re.match(r"[0-9.]+ kΩ from g1 to ground \(ζ → 0\.05[0-9]?\)",
                    row["damping to try"])
    assert "one oscillating pair (2)" in html


def test_stabilisers_and_margin_are_tabled_as_the_verdict_gives_them(checks):
    """Issue 12: the verdict's hints (placement, resistor in engineering notation, ζ with it)
    and its margin (least-damped natural frequencies with their symmetry) on the check page."""
    _, _, check = checks["pa"]
    verdict = check["verdict"]
    html = pages.check_page(check)
    hints = table(html, "hints")
    assert len(hints) == len(verdict["hints"]) > 0
    first = verdict["hints"][0]
    assert hints[0]["where"] == f"between {first['between'][0]} and {first['between'][1]}"
    assert hints[0]["resistor"] == format_ohm(first["resistance_ohm"])
    assert hints[0]["meets the target"] == "yes" and hints[0]["growing after"] == "none"
    margin = table(html, "margin")
    assert len(margin) == len(verdict["margin"]["least_damped"])
    assert [r["symmetry"] for r in margin] == [e["symmetry"]
                                               for e in verdict["margin"]["least_damped"]]
    assert margin[0]["ζ"] == format_number(verdict["margin"]["least_damped"][0]["damping_ratio"],
                                           3)
    # an in-band cost, as a verdict with options.operating_band_hz carries it
    tweaked = copy.deepcopy(check)
    tweaked["verdict"]["hints"][0]["in_band_cost"] = {
        "band_hz": [2.4e9, 2.6e9], "max_gain_change_db": -0.25, "s21_change_db": -0.5,
        "points": 9}
    row = table(pages.check_page(tweaked), "hints")[0]
    assert row["in-band cost"] == "MSG/MAG −0.25 dB, |S21| −0.5 dB in 2.4 GHz – 2.6 GHz"
    tweaked["verdict"]["hints"][0]["in_band_cost"].update(max_gain_change_db=0.0,
                                                          s21_change_db=-1e-9)
    row = table(pages.check_page(tweaked), "hints")[0]
    assert row["in-band cost"] == "no change in 2.4 GHz – 2.6 GHz"


def test_mu_near_one_shows_mu_minus_one(checks):
    _, _, check = checks["pa_stable"]
    mu = check["verdict"]["two_port"]["mu_min"]
    assert 0 < mu - 1 < 1e-3  # μ → 1 at the band edges (lossless DC blocks; families docstring)
    html = pages.check_page(check)
    assert f"(μ − 1 = {format_power_of_ten(mu - 1, '', 3)})" in html
    assert "unconditionally stable ports</span>" in html


def test_fields_of_later_verdicts_show_when_present(checks):
    """Issue 14 adds count_complete, assumptions, next_sweep, devices[].fmax_hz and per-mode
    fields; pages read them with .get, so the same page works with and without them."""
    _, _, check = checks["pa"]
    verdict = copy.deepcopy(check["verdict"])
    verdict.update(count_complete=False,
                   assumptions=[{"code": "fmax_declared", "message": "devices declared fmax"}],
                   next_sweep={"band_hz": [0.0, 4e12], "frequencies_hz": [2.24e9, 2.25e9],
                               "reason": "band top not settled"})
    verdict["devices"][0]["fmax_hz"] = 3e11
    verdict["modes"][0].update({PINNED_KEY: True, "symmetry": "odd"})
    html = pages.check_page({**check, "verdict": verdict})
    assert "at least one oscillating pair (2)" in html and "what to sweep next" in html
    assert "0 Hz (include DC) – 4 THz" in html and "2 extra frequencies: 2.24 GHz, 2.25 GHz" in html
    assert "fmax_declared" in html and table(html, "devices")[0]["f_max"] == "300 GHz"
    row = table(html, "modes")[0]
    assert row["symmetry"] == "odd" and row["pinned down by the data"] == "yes"
    plain = pages.check_page(check)
    assert "what to sweep next" not in plain and "f_max" not in plain


def test_report_folder_gives_reasons_without_plots_too(checks, tmp_path):
    """Pages written with --plots none still say why a device count is missing (from the
    engine's analysis alone); with plots, the same reasons come with the pictures."""
    from service.reports.outcomes import item_from_check
    from service.reports.writer import write_batch_report

    _, request, check = checks["pa"]
    notes = request_device_notes(request, check["verdict"])
    for choice in ("none", "all"):
        index = write_batch_report(tmp_path / choice, {"id": "bat_p"}, [item_from_check(check)],
                                   {check["id"]: check}, {check["id"]: request}, plots=choice)
        html = (index.parent / "checks" / f"{check['id']}.html").read_text(encoding="utf-8")
        rows = {r["device"]: r.get("why no count", "") for r in table(html, "devices")}
        assert rows == {name: notes.get(name, "") for name in rows}
        assert ('id="plot-device-1"' in html) is (choice == "all")


def test_ci_details_name_each_modes_best_stabiliser(checks):
    from service.reports.outcomes import details_text, item_from_check

    _, _, check = checks["pa"]
    best = check["verdict"]["modes"][0]["hints"][0]
    text = details_text(item_from_check(check), check)
    placement = (f"between {best['between'][0]} and {best['between'][1]}"
                 if best["between"][1] else f"from {best['between'][0]} to ground")
    assert f"damping to try: {format_ohm(best['resistance_ohm'])} {placement}" in text
