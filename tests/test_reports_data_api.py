"""The margin and curves routes of the API: GET /v1/checks/{id}/curves.csv, GET
/v1/batches/{id}/margin.csv and the margin page GET /v1/batches/{id}/margin, and the batch page's
margin column.

Oracles: the lumped circuits the variants come from (``workers.lumped``): NDF as the determinant
ratio of the whole MNA matrix (``normalized_determinant``) and each node's driving-point
admittance 1/(Y_ports + terminations)⁻¹_kk at the samples; the least-damped ζ of scipy.linalg.eig
on the MNA pencil; CSV read back with Python's csv module (RFC 4180); text/csv is the media type
of RFC 7111; errors are problem+json (RFC 9457).
"""

from __future__ import annotations

import csv
import io
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from service.auth import create_token
from service.reports.curves import curve_columns
from service.reports.trend import TREND_COLUMNS
from tests.client_live_server import live_server
from tests.support.live_api import (
    assert_private,
    authorised_session,
    submit_batch_and_wait,
)
from workers.lumped import port_admittance
from workers.lumped.families import two_stage_lna
from workers.lumped.mna import normalized_determinant

BAND_HZ = np.geomspace(1e6, 1e11, 401)
VARIANTS = {"R=100": 100.0, "R=22": 22.0, "R=none": None}  # gate-return damping of the LNA


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    folder: Path = tmp_path_factory.mktemp("report-data-api")
    with live_server(folder) as live:
        session = authorised_session(live.token)
        variants = [{"label": label, **two_stage_lna(gate_return_damping_ohm=ohms)
                     .check_request(BAND_HZ)} for label, ohms in VARIANTS.items()]
        accepted = submit_batch_and_wait(session, live.url,
                                         {"label": "damping sweep", "variants": variants})
        yield live, session, accepted["id"], dict(zip(VARIANTS, accepted["check_ids"],
                                                      strict=True))


def _rows(text: str) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(text)))


def test_curves_are_the_lumped_circuits_ndf_and_admittances(served):
    live, session, _, ids = served
    response = session.get(f"{live.url}/v1/checks/{ids['R=none']}/curves.csv", timeout=120)
    assert response.status_code == 200
    assert response.headers["Content-Type"].startswith("text/csv")
    case = two_stage_lna(gate_return_damping_ohm=None)
    names = [name for name, _, _ in case.ports]
    header = next(csv.reader(io.StringIO(response.text)))
    assert header == curve_columns(["Q1", "Q2"], names)
    rows = _rows(response.text)
    samples = [r for r in rows if r["source"] == "sample"]
    model = [r for r in rows if r["source"] == "model"]
    assert len(samples) == BAND_HZ.size and model  # the refinement added points
    f = np.array([float(r["frequency_hz"]) for r in rows])
    assert np.all(np.diff(f) > 0)
    at = np.array([float(r["frequency_hz"]) for r in samples])
    np.testing.assert_array_equal(at, BAND_HZ)
    ndf = np.array([complex(float(r["ndf_re"]), float(r["ndf_im"])) for r in samples])
    np.testing.assert_allclose(ndf, normalized_determinant(case.circuit, at, case.terminations),
                               rtol=1e-6)
    y = port_admittance(case.circuit, case.port_nodes, at)
    y += np.diag([1 / 50.0 if role == "external" else 0.0 for _, _, role in case.ports])
    driving = 1 / np.diagonal(np.linalg.inv(y), axis1=1, axis2=2)
    for k, name in enumerate(names):
        ours = np.array([complex(float(r[f"Y_{name}_re_s"]), float(r[f"Y_{name}_im_s"]))
                         for r in samples])
        np.testing.assert_allclose(ours, driving[:, k], rtol=1e-6, atol=1e-12)
    # model rows lie between samples and carry the NDF model's values near the data
    i = int(np.searchsorted(at, float(model[0]["frequency_hz"])))
    assert at[i - 1] < float(model[0]["frequency_hz"]) < at[i]
    inside = np.array([float(r["frequency_hz"]) for r in model])
    truth = normalized_determinant(case.circuit, inside, case.terminations)
    ours = np.array([complex(float(r["ndf_re"]), float(r["ndf_im"])) for r in model])
    assert np.max(np.abs(ours - truth)) <= 1e-3 * np.max(np.abs(truth))


def test_margin_csv_gives_each_variants_least_damped_pair_in_either_order(served):
    live, session, batch_id, ids = served
    response = session.get(f"{live.url}/v1/batches/{batch_id}/margin.csv", timeout=120)
    assert response.status_code == 200 and response.headers["Content-Type"].startswith("text/csv")
    assert next(csv.reader(io.StringIO(response.text))) == list(TREND_COLUMNS)
    rows = _rows(response.text)
    assert [r["label"] for r in rows] == list(VARIANTS)
    assert [r["position"] for r in rows] == ["1", "2", "3"]
    for row, ohms in zip(rows, VARIANTS.values(), strict=True):
        case = two_stage_lna(gate_return_damping_ohm=ohms)
        poles = case.natural_frequencies()
        size = np.abs(poles)
        band = poles[(poles.imag > 0) & (size >= 2 * np.pi * BAND_HZ[0])
                     & (size <= 2 * np.pi * BAND_HZ[-1])]
        zeta = -band.real / np.abs(band)
        assert float(row["least_damping_ratio"]) == pytest.approx(zeta.min(), rel=0.01)
        assert row["id"] == ids[row["label"]]
    assert rows[2]["verdict"] == "unstable" and float(rows[2]["least_damping_ratio"]) < 0
    by_label = _rows(session.get(f"{live.url}/v1/batches/{batch_id}/margin.csv?order=label",
                                 timeout=120).text)
    assert [r["label"] for r in by_label] == ["R=22", "R=100", "R=none"]  # 22 before 100


def test_margin_page_and_batch_page_show_the_margin(served):
    live, session, batch_id, ids = served
    page = session.get(f"{live.url}/v1/batches/{batch_id}/margin?order=label", timeout=120)
    assert page.status_code == 200 and page.headers["Content-Type"].startswith("text/html")
    assert f"/v1/batches/{batch_id}/margin.csv?order=label" in page.text
    assert f"/v1/batches/{batch_id}/margin?order=submission" in page.text
    assert 'src="data:image/svg+xml;base64,' in page.text
    report = session.get(f"{live.url}/v1/batches/{batch_id}/report", timeout=120).text
    assert f"/v1/batches/{batch_id}/margin" in report and "least ζ" in report
    for label, ohms in VARIANTS.items():  # the margin column's sort key is ζ itself
        row = re.search(rf'href="/v1/checks/{ids[label]}/report".*?</tr>', report, re.S)[0]
        keys = re.findall(r'data-key="([^"]*)"', row)  # verdict, count, frequency, ζ, …
        poles = two_stage_lna(gate_return_damping_ohm=ohms).natural_frequencies()
        band = poles[(poles.imag > 0) & (np.abs(poles) >= 2 * np.pi * BAND_HZ[0])
                     & (np.abs(poles) <= 2 * np.pi * BAND_HZ[-1])]
        assert float(keys[3]) == pytest.approx(np.min(-band.real / np.abs(band)), rel=0.01)


def test_svg_of_the_margin_page_marks_every_variant(served):
    import base64

    live, session, batch_id, _ = served
    page = session.get(f"{live.url}/v1/batches/{batch_id}/margin", timeout=120).text
    svg = base64.b64decode(re.search(r'src="data:image/svg\+xml;base64,([^"]+)"', page)[1])
    ids = {e.get("id") for e in ET.fromstring(svg).iter() if e.get("id")}
    assert {"trend-zeta", "trend-frequency", "trend-target"} <= ids


BAD = {"/v1/batches/{batch}/margin.csv?order=size": 422,
       "/v1/batches/{batch}/margin?order=size": 400,
       "/v1/batches/bat_AAAAAAAAAAAAAAAAAAAAAA/margin.csv": 404,
       "/v1/batches/bat_AAAAAAAAAAAAAAAAAAAAAA/margin": 404,
       "/v1/checks/chk_AAAAAAAAAAAAAAAAAAAAAA/curves.csv": 404}


def test_bad_queries_and_unknown_ids_are_problems(served):
    live, session, batch_id, _ = served
    for path, status in BAD.items():
        response = session.get(live.url + path.format(batch=batch_id), timeout=60)
        assert (response.status_code, response.headers["Content-Type"].split(";")[0]) == \
            (status, "application/problem+json"), path


def test_other_tenants_and_strangers_get_nothing_and_unfinished_checks_wait(served):
    live, session, batch_id, ids = served
    assert_private(live.url, (f"/v1/checks/{ids['R=22']}/curves.csv",
                              f"/v1/batches/{batch_id}/margin.csv",
                              f"/v1/batches/{batch_id}/margin"),
                   create_token(live.stores.access, "rival"))
    live.queue.hold()
    try:
        request = two_stage_lna().check_request(np.geomspace(1e6, 1e12, 201))
        accepted = session.post(f"{live.url}/v1/checks", json=request, timeout=60).json()
        response = session.get(f"{live.url}/v1/checks/{accepted['id']}/curves.csv", timeout=60)
        assert response.status_code == 409 and "Retry-After" in response.headers
    finally:
        live.queue.release()
