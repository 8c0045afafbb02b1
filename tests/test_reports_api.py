"""The API's report routes: plots as SVG/PNG, the check and batch pages, tenants and states.

The check is the two-stage LNA without its gate-return damping resistor (one complex pair of
right-half-plane natural frequencies by scipy.linalg.eig, see tests/test_reports.py). Media types:
image/svg+xml (SVG 1.1, W3C), image/png (RFC 2083); errors are problem+json (RFC 9457).
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from service.auth import create_token
from tests.client_live_server import live_server
from tests.support.live_api import (
    assert_private,
    authorised_session,
    submit_batch_and_wait,
)
from workers.lumped.families import two_stage_lna

BAND_HZ = np.geomspace(1e6, 1e12, 1001)


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    folder: Path = tmp_path_factory.mktemp("reports-api")
    with live_server(folder) as live:
        session = authorised_session(live.token)
        request = two_stage_lna(gate_return_damping_ohm=None).check_request(BAND_HZ)
        body = {"label": "lna family", "variants": [{"label": "no damping", **request}]}
        accepted = submit_batch_and_wait(session, live.url, body, timeout_s=60)
        yield live, session, accepted["id"], accepted["check_ids"][0]


def test_plots_come_as_svg_and_png(served):
    live, session, _, check_id = served
    svg = session.get(f"{live.url}/v1/checks/{check_id}/plots/ndf.svg", timeout=120)
    assert svg.status_code == 200 and svg.headers["Content-Type"].startswith("image/svg+xml")
    ids = {e.get("id") for e in ET.fromstring(svg.content).iter() if e.get("id")}
    assert {"ndf-curve", "mode-marker"} <= ids
    png = session.get(f"{live.url}/v1/checks/{check_id}/plots/admittance.png", timeout=120)
    assert png.status_code == 200 and png.headers["Content-Type"] == "image/png"
    assert png.content[:8] == b"\x89PNG\r\n\x1a\n"


def test_check_page_embeds_every_plot_and_links_its_batch(served):
    live, session, batch_id, check_id = served
    page = session.get(f"{live.url}/v1/checks/{check_id}/report", timeout=300)
    assert page.status_code == 200 and page.headers["Content-Type"].startswith("text/html")
    # ndf, admittance, factors, circles and one return-difference plot per device (Q1, Q2)
    assert len(re.findall(r'src="data:image/svg\+xml;base64,', page.text)) == 6
    assert 'id="plot-device-1"' in page.text and 'id="plot-device-2"' in page.text
    assert f"/v1/batches/{batch_id}/report" in page.text
    assert f"/v1/checks/{check_id}/report?nodes=all#plot-admittance" in page.text
    bare = session.get(f"{live.url}/v1/checks/{check_id}/report?plots=none", timeout=60)
    assert "data:image" not in bare.text and "unstable" in bare.text.lower()


def test_device_plots_and_every_node_on_request(served):
    live, session, _, check_id = served
    svg = session.get(f"{live.url}/v1/checks/{check_id}/plots/device-1.svg", timeout=120)
    assert svg.status_code == 200 and svg.headers["Content-Type"].startswith("image/svg+xml")
    ids = {e.get("id") for e in ET.fromstring(svg.content).iter() if e.get("id")}
    assert {"device-curve", "device-curve-zoom", "unity-marker"} <= ids
    every = session.get(f"{live.url}/v1/checks/{check_id}/plots/admittance.svg?nodes=all",
                        timeout=120)
    ids = {e.get("id") for e in ET.fromstring(every.content).iter() if e.get("id")}
    # the LNA's eight ports (two_stage_lna): in, out, g1, s1, d1, g2, s2, d2
    assert {f"admittance-re-{n}" for n in ("in", "out", "g1", "s1", "d1", "g2", "s2", "d2")} \
        <= ids
    few = session.get(f"{live.url}/v1/checks/{check_id}/plots/admittance.svg", timeout=120)
    assert few.content != every.content
    page = session.get(f"{live.url}/v1/checks/{check_id}/report?plots=none", timeout=60)
    assert 'id="devices"' in page.text


def test_batch_page_links_each_check(served):
    live, session, batch_id, check_id = served
    page = session.get(f"{live.url}/v1/batches/{batch_id}/report", timeout=60)
    assert page.status_code == 200
    assert f'href="/v1/checks/{check_id}/report"' in page.text
    assert "lna family" in page.text and "no damping" in page.text


@pytest.mark.parametrize(("path", "status"), [
    ("/v1/checks/{check}/plots/smith.svg", 404),
    ("/v1/checks/{check}/plots/ndf.gif", 404),
    ("/v1/checks/{check}/plots/device-9.svg", 404),
    ("/v1/checks/{check}/plots/device-0.svg", 404),
    ("/v1/checks/{check}/plots/admittance.svg?nodes=some", 400),
    ("/v1/checks/{check}/report?nodes=some", 400),
    ("/v1/checks/chk_AAAAAAAAAAAAAAAAAAAAAA/plots/ndf.svg", 404),
    ("/v1/batches/bat_AAAAAAAAAAAAAAAAAAAAAA/report", 404),
])
def test_unknown_things_are_problems(served, path, status):
    live, session, _, check_id = served
    response = session.get(live.url + path.format(check=check_id), timeout=60)
    assert response.status_code == status
    assert response.headers["Content-Type"].startswith("application/problem+json")
    assert response.json()["status"] == status


def test_other_tenants_and_strangers_see_nothing(served):
    live, _, batch_id, check_id = served
    assert_private(live.url, (f"/v1/checks/{check_id}/plots/ndf.svg",
                              f"/v1/checks/{check_id}/report", f"/v1/batches/{batch_id}/report"),
                   create_token(live.stores.access, "rival"))


def test_plots_wait_for_the_verdict(served):
    live, session, _, _ = served
    live.queue.hold()
    try:
        request = two_stage_lna().check_request(np.geomspace(1e6, 1e12, 201))
        accepted = session.post(f"{live.url}/v1/checks", json=request, timeout=60).json()
        response = session.get(f"{live.url}/v1/checks/{accepted['id']}/plots/ndf.svg",
                               timeout=60)
        assert response.status_code == 409 and "Retry-After" in response.headers
        page = session.get(f"{live.url}/v1/checks/{accepted['id']}/report", timeout=60)
        assert page.status_code == 200 and "queued" in page.text and "data:image" not in page.text
    finally:
        live.queue.release()


def test_pages_and_plots_carry_the_security_headers(served):
    """Pages get the policy they carry in their <meta> (plus frame-ancestors); SVG may style
    itself; PNG may do nothing; all are nosniff (service.api.security_headers)."""
    from service.reports.pages import PAGE_POLICY

    live, session, batch_id, check_id = served
    page = session.get(f"{live.url}/v1/checks/{check_id}/report?plots=none", timeout=60)
    assert page.headers["Content-Security-Policy"] == PAGE_POLICY + "; frame-ancestors 'none'"
    assert f'content="{PAGE_POLICY}"'.replace("'", "&#39;") in page.text
    batch = session.get(f"{live.url}/v1/batches/{batch_id}/report", timeout=60)
    svg = session.get(f"{live.url}/v1/checks/{check_id}/plots/ndf.svg", timeout=120)
    png = session.get(f"{live.url}/v1/checks/{check_id}/plots/ndf.png", timeout=120)
    for response in (page, batch, svg, png):
        assert response.status_code == 200
        assert response.headers["X-Content-Type-Options"] == "nosniff"
        assert "frame-ancestors 'none'" in response.headers["Content-Security-Policy"]
    assert "style-src 'unsafe-inline'" in svg.headers["Content-Security-Policy"]
    assert png.headers["Content-Security-Policy"].startswith("default-src 'none';")
    assert svg.headers["Cache-Control"] == "private, max-age=3600"  # the endpoint's own
