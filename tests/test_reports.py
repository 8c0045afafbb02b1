"""Plots and pages of a stable and an unstable check.

Circuits: the two-stage LNA of ``workers.lumped.families`` with and without the damping resistor in
its first gate DC return. The independent truth is scipy.linalg.eig on the circuit's MNA pencil
(det(G + sC) = 0): no right-half-plane natural frequency with the resistor, one complex pair near
145 MHz without it. SVG is parsed with xml.etree (W3C SVG 1.1 namespace); PNG is checked against
its 8-byte signature (PNG specification, W3C / ISO/IEC 15948, section "PNG signature" —
section number from memory) and decoded.
"""

from __future__ import annotations

import io
import re
import xml.etree.ElementTree as ET
from html.parser import HTMLParser

import numpy as np
import pytest

from service.reports import pages, plots
from service.reports.data import figure_data, nodes_that_matter
from service.reports.outcomes import item_from_check
from service.runner import run_check_json
from workers.lumped.families import parallel_rlc_negative_g, two_stage_lna

SVG_NS = "{http://www.w3.org/2000/svg}"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
BAND_HZ = np.geomspace(1e6, 1e12, 2001)


def eig_unstable(case) -> np.ndarray:
    s = case.natural_frequencies()
    return s[(s.real > 0) & (s.imag > 0)]


@pytest.fixture(scope="module")
def lna():
    """{name: (case, request, verdict, figure data)} for the stable and the unstable LNA."""
    out = {}
    for name, case in (("stable", two_stage_lna()),
                       ("unstable", two_stage_lna(gate_return_damping_ohm=None))):
        request = case.check_request(BAND_HZ)
        verdict = run_check_json(request)
        out[name] = (case, request, verdict, figure_data(request, verdict))
    return out


@pytest.fixture(scope="module")
def svgs(lna):
    return {(name, plot): plots.render_plot(plot, lna[name][3], "svg")
            for name in lna for plot in plots.PLOT_NAMES}


def svg_ids(svg: bytes) -> set[str]:
    root = ET.fromstring(svg)
    assert root.tag == SVG_NS + "svg"
    return {element.get("id") for element in root.iter() if element.get("id")}


def test_oracle_agrees_with_the_verdicts(lna):
    assert eig_unstable(lna["stable"][0]).size == 0 and lna["stable"][2]["verdict"] == "stable"
    pair = eig_unstable(lna["unstable"][0])
    assert pair.size == 1 and lna["unstable"][2]["verdict"] == "unstable"
    mode = lna["unstable"][2]["modes"][0]
    assert mode["frequency_hz"] == pytest.approx(pair[0].imag / (2 * np.pi), rel=0.02)


@pytest.mark.parametrize("plot", plots.PLOT_NAMES)
def test_every_plot_is_svg_with_its_curves(svgs, plot):
    expected = {"ndf": {"ndf-curve", "ndf-mirror", "origin", "ndf-curve-zoom", "frequency-marks",
                        "encirclement-note"},
                "admittance": {"admittance-re-g1", "admittance-im-g1"},
                "factors": {"k-curve", "mu-curve", "mu-prime-curve", "unity-line"},
                "circles": {"unit-circle", "load-circle-0", "source-circle-0"}}[plot]
    for name in ("stable", "unstable"):
        assert expected <= svg_ids(svgs[(name, plot)]), (name, plot)


def test_unstable_check_marks_its_mode_and_kurokawa_points(lna, svgs):
    ndf_ids = svg_ids(svgs[("unstable", "ndf")])
    assert {"mode-marker", "mode-marker-zoom"} <= ndf_ids
    admittance_ids = svg_ids(svgs[("unstable", "admittance")])
    assert {"kurokawa-point-g1", "kurokawa-point-im-g1", "mode-line-0"} <= admittance_ids
    text = svgs[("unstable", "ndf")].decode()
    assert "clockwise turns around 0: 2" in text  # one complex pair = 2 encirclements


def test_stable_check_has_no_mode_marks(svgs):
    assert not any(i.startswith("mode-") for i in svg_ids(svgs[("stable", "ndf")]))
    assert not any(i.startswith("mode-") for i in svg_ids(svgs[("stable", "admittance")]))
    assert "clockwise turns around 0: 0" in svgs[("stable", "ndf")].decode()


def test_mode_marker_sits_on_the_ndf_curve_at_the_oscillation(lna):
    """The ring is drawn at NDF(j·2π·f_mode), f_mode within 2 % of the eig frequency."""
    data = lna["unstable"][3]
    with plots.matplotlib.rc_context(plots._RC):
        fig = plots.ndf_figure(data)
    marker = next(a for a in fig.findobj() if getattr(a, "get_gid", lambda: None)() ==
                  "mode-marker-zoom")
    f_eig = eig_unstable(lna["unstable"][0])[0].imag / (2 * np.pi)
    # the NDF sample nearest the eig frequency, against the marker (linear zoom panel)
    nearest = data.ndf[np.argmin(np.abs(np.log(data.frequency_hz / f_eig)))]
    x, y = marker.get_xdata()[0], marker.get_ydata()[0]
    assert abs(complex(x, y) - nearest) < 0.25 * abs(nearest)


def test_kurokawa_points_are_at_the_oscillation_frequency(lna):
    """Kurokawa (1969): small growth → the crossing frequency approximates the oscillation's."""
    data = lna["unstable"][3]
    f_eig = eig_unstable(lna["unstable"][0])[0].imag / (2 * np.pi)
    shown = {data.node_names[k] for k in data.plotted_nodes}
    marks = [m for m in data.kurokawa if m.node in shown]
    assert marks and data.node_names[data.plotted_nodes[0]] == "g1"
    assert min(abs(m.frequency_hz / f_eig - 1) for m in marks) < 0.03
    assert all(m.re_admittance_s <= 0 for m in marks)  # Kurokawa's condition


def test_bands_and_circles_follow_the_two_port(lna):
    for name in ("stable", "unstable"):
        data = lna[name][3]
        assert data.two_port is not None
        with plots.matplotlib.rc_context(plots._RC):
            fig = plots.factors_figure(data.two_port)
        bands = [a for a in fig.findobj() if str(a.get_gid()).startswith("instability-band-")]
        assert len(bands) == len(lna[name][2]["two_port"]["unstable_bands_hz"])
        # Edwards–Sinsky: mu < 1 exactly inside the shaded bands (samples strictly inside)
        mu, f = data.two_port.factors.mu, data.two_port.frequency_hz
        for lo, hi in data.two_port.bands_hz:
            inside = (f > lo) & (f < hi)
            assert np.all(mu[inside] < 1.0)
        outside = np.ones_like(f, dtype=bool)
        for lo, hi in data.two_port.bands_hz:
            outside &= (f < lo) | (f > hi)
        assert np.all(mu[outside] >= 1.0)


def test_compression_keeps_the_winding_number():
    """log10(1+|z|)·z/|z| keeps arg z, so turns around 0 are unchanged (argument principle)."""
    t = np.linspace(0.0, 4 * np.pi, 4001)

    def turns(z):
        return (np.unwrap(np.angle(z))[-1] - np.angle(z[0])) / (2 * np.pi)

    around = 3.0 * np.exp(-1j * t)          # twice clockwise around 0
    beside = 5.0 + 1.0 * np.exp(-1j * t)    # twice around 5, never around 0
    huge = 1e9 * np.exp(-1j * t) + 2e8      # large radius still encloses 0
    for curve, expected in ((around, -2), (beside, 0), (huge, -2)):
        assert turns(curve) == pytest.approx(expected, abs=1e-9)
        assert turns(plots.compress(curve)) == pytest.approx(expected, abs=1e-9)


def test_png_output_and_repeatable_svg(lna):
    data = lna["unstable"][3]
    png = plots.render_plot("factors", data, "png")
    assert png[:8] == PNG_SIGNATURE
    image = plots.matplotlib.image.imread(io.BytesIO(png))
    assert image.ndim == 3 and image.shape[0] > 200 and float(image[..., :3].std()) > 0.05
    assert plots.render_plot("circles", data, "svg") == plots.render_plot("circles", data, "svg")


def test_one_port_circuit_has_no_two_port_plots():
    case = parallel_rlc_negative_g(g_neg_s=-8e-3)
    request = case.check_request(np.geomspace(1e6, 1e12, 401))
    data = figure_data(request, run_check_json(request))
    assert data.two_port is None
    assert plots.build_figure("factors", data) is None
    assert plots.build_figure("circles", data) is None
    assert plots.render_plot("ndf", data, "svg") is not None
    with pytest.raises(ValueError, match="unknown plot"):
        plots.build_figure("smith", data)


def test_nodes_that_matter_fall_back_to_external_ports():
    verdict = {"modes": [], "nodes": [
        {"name": "in", "role": "external", "min_re_admittance_s": 0.02},
        {"name": "g1", "role": "probe", "min_re_admittance_s": 0.001},
        {"name": "out", "role": "external", "min_re_admittance_s": 0.02}]}
    assert nodes_that_matter(("in", "g1", "out"), verdict, ()) == (0, 2)
    verdict["nodes"][1]["min_re_admittance_s"] = -0.003
    assert nodes_that_matter(("in", "g1", "out"), verdict, ()) == (1,)


class _Rows(HTMLParser):
    """Collects the batch table's rows: (first link, verdict cell key)."""

    def __init__(self) -> None:
        super().__init__()
        self.rows: list[list[str]] = []
        self._in_body = False

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "tbody":
            self._in_body = True
        elif tag == "tr" and self._in_body:
            self.rows.append([])
        elif tag == "a" and self._in_body and self.rows:
            self.rows[-1].append(attrs.get("href", ""))


def test_batch_page_lists_worst_first_and_escapes_labels(lna):
    checks = []
    for i, name in enumerate(("stable", "unstable")):
        checks.append({"id": f"chk_{name}", "label": f"<b>{name}</b>", "status": "done",
                       "verdict": lna[name][2], "attempts": 1, "order": i})
    items = [item_from_check(c) for c in checks]
    html = pages.batch_page({"id": "bat_1", "label": "lna family"}, items,
                            lambda item: f"checks/{item['id']}.html")
    parser = _Rows()
    parser.feed(html)
    assert [row[0] for row in parser.rows] == ["checks/chk_unstable.html",
                                               "checks/chk_stable.html"]
    assert "<b>unstable</b>" not in html and "&lt;b&gt;unstable&lt;/b&gt;" in html
    page = pages.check_page(checks[1], {"ndf": b"<svg/>"}, batch_href="../index.html")
    assert 'id="plot-ndf"' in page and "data:image/svg+xml;base64," in page
    assert re.search(r"14[0-9]\.[0-9] MHz", page)  # the mode's frequency, ≈ 146 MHz


def test_report_folder_draws_the_same_pictures_in_parallel(tmp_path):
    """Two oscillating tanks (closed form: G = 1/R + g < 0) and one with a broken request."""
    from service.reports.writer import write_batch_report

    checks, payloads = {}, {}
    for tag, l_h in (("a", 1e-9), ("b", 2e-9)):
        request = parallel_rlc_negative_g(l_h=l_h, g_neg_s=-8e-3).check_request(
            np.geomspace(1e6, 1e12, 301))
        checks[f"chk_{tag}"] = {"id": f"chk_{tag}", "label": tag, "status": "done",
                                "verdict": run_check_json(request)}
        payloads[f"chk_{tag}"] = request
    checks["chk_c"] = dict(checks["chk_a"], id="chk_c", label="c")
    payloads["chk_c"] = {"frequency_hz": [1.0]}  # cannot be analysed again
    items = [item_from_check(c) for c in checks.values()]
    batch = {"id": "bat_p", "label": "parallel"}
    serial = write_batch_report(tmp_path / "serial", batch, items, checks, payloads, processes=1)
    parallel = write_batch_report(tmp_path / "parallel", batch, items, checks, payloads,
                                  processes=2)
    for tag in ("a", "b", "c"):
        one = (serial.parent / "checks" / f"chk_{tag}.html").read_text(encoding="utf-8")
        two = (parallel.parent / "checks" / f"chk_{tag}.html").read_text(encoding="utf-8")
        assert one == two, tag
    page_a = (parallel.parent / "checks" / "chk_a.html").read_text(encoding="utf-8")
    page_c = (parallel.parent / "checks" / "chk_c.html").read_text(encoding="utf-8")
    assert 'id="plot-ndf"' in page_a and 'id="plot-circles"' not in page_a  # no two-port
    assert "could not be drawn" in page_c and 'id="plot-ndf"' not in page_c
