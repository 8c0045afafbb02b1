"""The pictures read at a glance: contours from the model between samples, labels that never
overlap, per-node styles, off-scale marks, stability circles whole and ticked on the right side.

Circuits (``workers.lumped.families``): the two-stage LNA without its gate-return damping resistor
(one complex pair near 145 MHz by scipy.linalg.eig on the MNA pencil) and the combined power stage
without its drain-to-drain resistor (an odd mode, +102 MHz ± j2242 MHz by eig). Independent
truths: NDF of the lumped circuit itself (``workers.lumped.mna.normalized_determinant``: det M /
det M₀ on the full MNA matrix, Platzker, Struble & Hetzler 1985), Edwards–Sinsky μ from the
S-parameters by its closed form (Edwards & Sinsky, IEEE Trans. MTT 40(12), 1992), and Γ_in =
S11 + S12 S21 Γ_L/(1 − S22 Γ_L) (Pozar, *Microwave Engineering*, 4th ed., ch. 12; chapter from
memory) for the unstable side of the load circles.
"""

from __future__ import annotations

import numpy as np
import pytest

from service.reports import plots
from service.reports.data import figure_data
from service.reports.plot_base import label_boxes, overlapping_labels
from service.reports.plot_nodes import node_style
from service.reports.plot_twoport import reflection_magnitude
from service.runner import run_check_json
from workers.lumped.families import combined_power_stage, two_stage_lna
from workers.lumped.mna import normalized_determinant

# 301 log-spaced points: sparse enough (4.7 % steps) that the model matters between samples
BAND_HZ = np.geomspace(1e6, 1e12, 301)


@pytest.fixture(scope="module")
def cases():
    """{name: (case, figure data)}; "lna" and "pa" oscillate, "pa_stable" does not."""
    out = {}
    for name, case in (("lna", two_stage_lna(gate_return_damping_ohm=None)),
                       ("pa", combined_power_stage(odd_mode_ohm=None)),
                       ("pa_stable", combined_power_stage())):
        request = case.check_request(BAND_HZ)
        out[name] = (case, figure_data(request, run_check_json(request)))
    return out


def drawn(name: str, data):
    with plots.matplotlib.rc_context(plots._RC):
        fig = plots.build_figure(name, data)
        fig.canvas.draw()
    return fig


def test_model_points_between_samples_follow_the_circuit(cases):
    """Every point the report adds between samples is within 1e-4 (relative) of the circuit's
    own NDF there, and the samples are all kept."""
    case, data = cases["lna"]
    contour = data.ndf_contour
    modelled = contour.from_model
    assert modelled.sum() > 100 and np.isin(BAND_HZ, contour.frequency_hz).all()
    exact = normalized_determinant(case.circuit, contour.frequency_hz[modelled],
                                   case.terminations)
    assert np.max(np.abs(contour.values[modelled] - exact) / np.abs(exact)) < 1e-4
    fig = drawn("ndf", data)
    gids = {a.get_gid() for a in fig.findobj() if a.get_gid()}
    assert any(g.startswith("model-stretch-") for g in gids)  # the model's stretches marked


def test_near_origin_panel_is_zoomed_to_the_closest_approach(cases):
    """The closest approach on a dense grid of the circuit's own NDF, against the panel."""
    case, data = cases["pa"]
    dense = np.geomspace(1e6, 1e12, 20001)
    closest = np.min(np.abs(normalized_determinant(case.circuit, dense, case.terminations)))
    value, _, _ = data.ndf_contour.closest_to_origin()
    assert abs(value) == pytest.approx(closest, rel=0.01)
    fig = drawn("ndf", data)
    near = fig.axes[1]
    assert near.get_xlim() == pytest.approx((-1.6 * abs(value), 1.6 * abs(value)))
    gids = {a.get_gid() for a in fig.findobj() if a.get_gid()}
    assert {"unity-marker", "unity-marker-zoom", "closest-marker", "label-closest"} <= gids


@pytest.mark.parametrize("name", ["lna", "pa"])
@pytest.mark.parametrize("plot", ["ndf", "device-1", "factors"])
def test_no_two_labels_overlap(cases, name, plot):
    """Label boxes (text extents after drawing) pairwise disjoint, at two resolutions."""
    fig = drawn(plot, cases[name][1])
    assert len(label_boxes(fig)) >= 3
    assert overlapping_labels(fig) == []
    fig.set_dpi(150)
    fig.canvas.draw()
    assert overlapping_labels(fig) == []


def test_mode_labels_are_placed(cases):
    """The label of the odd mode is never the one left out (modes choose first)."""
    for plot in ("ndf", "device-1"):
        fig = drawn(plot, cases["pa"][1])
        texts = [t.get_text() for ax in fig.axes for t in ax.texts
                 if str(t.get_gid()).startswith("label-mode")]
        assert any(t.startswith("mode 2.24") for t in texts), (plot, texts)


def test_symmetric_nodes_are_told_apart(cases):
    """g_a and g_b of the symmetric pair have equal admittances; both stay visible."""
    _, data = cases["pa"]
    names = [data.node_names[k] for k in data.plotted_nodes]
    assert {"g_a", "g_b"} <= set(names)
    y = data.admittance
    ga, gb = data.node_names.index("g_a"), data.node_names.index("g_b")
    assert np.allclose(y[:, ga], y[:, gb], rtol=1e-6)  # the symmetry the styles must survive
    fig = drawn("admittance", data)
    lines = {line.get_gid(): line for line in fig.axes[0].lines if line.get_gid()}
    a, b = lines["admittance-re-g_a"], lines["admittance-re-g_b"]
    assert a.get_color() != b.get_color() and a.get_linestyle() != b.get_linestyle()
    assert a.get_markevery() != b.get_markevery()
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    assert any("(= g_" in t for t in legend) and any(t.endswith("100 %") for t in legend)
    assert len({str(node_style(i)) for i in range(32)}) == 32


def test_every_node_on_request(cases):
    case, _ = cases["pa"]
    request = case.check_request(BAND_HZ)
    data = figure_data(request, run_check_json(request), nodes="all")
    fig = drawn("admittance", data)
    gids = {line.get_gid() for line in fig.axes[0].lines}
    assert {f"admittance-re-{p['name']}" for p in request["ports"]} <= gids


def test_k_beyond_the_scale_is_marked_at_its_edge(cases):
    """The LNA's lowest K is far below the scale: a mark at the lower edge names its value."""
    _, data = cases["lna"]
    k_min = data.verdict["two_port"]["k_min"]
    assert k_min < -100
    fig = drawn("factors", data)
    ax = fig.axes[0]
    marks = [line for line in ax.lines if str(line.get_gid()).startswith("off-scale-k-")]
    assert marks and any(m.get_ydata()[0] == ax.get_ylim()[0] for m in marks)
    labels = [t.get_text() for t in ax.texts if str(t.get_gid()).startswith("label-off-scale-k")]
    assert any(f"K = {k_min:.3g}".replace("-", "−") in t for t in labels), labels
    assert ax.get_ylabel().startswith("K, μ")


def test_a_unilateral_two_port_plots_its_band():
    """S12 = 0 (a transconductance from in to out, nothing back): K = (1 − |S11|² − |S22|² +
    |Δ|²) / (2 |S12 S21|) (Rollett 1962) and μ are infinite or undefined at every frequency, so
    no factor lies on the axis; the plot still spans the band (found by the API fuzz test: a
    500, matplotlib refusing a log axis over its default 0..1)."""
    f = [1e8, 1e9, 2e9, 3e9]
    request = {
        "frequency_hz": f, "parameters": "Y",
        "data": {"re": [[[0.02, 0.0], [0.05, 0.02]]] * 4, "im": [[[0.0, 0.0], [0.0, 0.0]]] * 4},
        "ports": [{"name": "in", "role": "external"}, {"name": "out", "role": "external"}],
        "devices": [{"name": "Q1", "gm_s": 0.05, "control": ["in", None],
                     "output": ["out", None]}],
    }
    data = figure_data(request, run_check_json(request))
    assert np.abs(data.two_port.s[:, 0, 1]).max() == 0.0
    assert not np.isfinite(data.two_port.factors.k).any()
    ax = drawn("factors", data).axes[0]
    assert ax.get_xscale() == "log" and ax.get_xlim() == pytest.approx((1e8, 3e9))


def test_unconditionally_stable_two_port_says_so(cases):
    """μ > 1 everywhere by the Edwards–Sinsky closed form, and the note on the circles."""
    _, data = cases["pa_stable"]
    s = data.two_port.s
    s11, s12, s21, s22 = s[:, 0, 0], s[:, 0, 1], s[:, 1, 0], s[:, 1, 1]
    delta = s11 * s22 - s12 * s21
    mu = (1 - np.abs(s11) ** 2) / (np.abs(s22 - delta * np.conj(s11)) + np.abs(s12 * s21))
    assert np.all(mu > 1) and data.two_port.unconditionally_stable
    fig = drawn("circles", data)
    assert "Unconditionally stable" in fig.get_suptitle()
    assert not any("Unconditionally" in (t.get_text() or "")
                   for t in drawn("circles", cases["lna"][1]).texts)


def test_circles_are_whole_and_ticked_towards_the_unstable_side(cases):
    _, data = cases["lna"]
    tp = data.two_port
    fig = drawn("circles", data)
    load = fig.axes[0]
    low, high = load.get_xlim()
    ticks = 0
    for line in load.lines:
        gid = str(line.get_gid())
        if gid.startswith("load-circle-") and gid.count("-") == 2:  # the circle itself
            x, y = line.get_xdata(), line.get_ydata()
            reach = np.max(np.abs(x + 1j * y))
            if reach <= 2.5:  # circles of the chart's size are not cut by the view
                assert low <= x.min() and x.max() <= high and low <= y.min() <= y.max() <= high
        if "-tick-" in gid:
            j = int(gid.split("-")[2])
            i = plots.circle_frequencies(tp)[j]
            start, end = line.get_xdata() + 1j * line.get_ydata()
            # the tick's far end lies where |Γ_in| > 1 (Pozar's Γ_in), its foot on |Γ_in| = 1
            assert reflection_magnitude(tp.s[i], np.array([end]), "load")[0] > 1.0
            assert reflection_magnitude(tp.s[i], np.array([start]), "load")[0] == \
                pytest.approx(1.0, abs=0.05)
            ticks += 1
    assert ticks > 10
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    assert any("of the disk unstable" in t for t in legend)


def test_device_plots_come_one_per_device(cases):
    _, data = cases["pa"]
    names = plots.plot_names(data)
    assert names[-2:] == ("device-1", "device-2")
    assert plots.render_plot("device-3", data) is None
    svg = plots.render_plot("device-1", data, "svg")
    assert b'id="device-curve"' in svg and b'id="device-curve-zoom"' in svg
