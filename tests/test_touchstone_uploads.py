"""Touchstone files as tools write them, through the API, the batch upload and the command line.

Circuit: the parallel RLC tank with a negative conductance of ``tests.api_fixtures.rlc_request``
(closed-form natural frequencies there); its Touchstone text is written by
``workers.lumped.checkdata.to_touchstone`` to the Touchstone 1.1 rules. What is checked here is
the boundary (issue 13 part 1): byte-order marks, 8-bit comments, the .sNp extension, a
non-finite R, and the reader's note on comment references reaching the verdict's diagnostics.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np
import pytest

from service.cli import main
from tests.api_fixtures import rlc_request, run_worker
from workers.lumped.checkdata import to_touchstone

FREQUENCY_HZ = np.geomspace(1e7, 1e12, 401)
CODE = "touchstone_comment_references"


def _tank_text(r_ohm: float = 200.0, z0: float = 50.0) -> str:
    request = rlc_request(r_ohm, FREQUENCY_HZ)
    s = np.asarray(request["data"]["re"]) + 1j * np.asarray(request["data"]["im"])
    return to_touchstone(FREQUENCY_HZ, s, z0=z0)


def _map(r_ohm: float = 200.0) -> dict:
    request = rlc_request(r_ohm, FREQUENCY_HZ)
    return {"ports": request["ports"], "devices": request["devices"]}


def _with_port_impedance(text: str, impedance: str) -> str:
    """'! Port Impedance' after every data line, as some field solvers write it."""
    lines = []
    for line in text.splitlines():
        lines.append(line)
        if line[:1].isdigit():
            lines.append(f"! Port Impedance {impedance}")
    return "\n".join(lines) + "\n"


def _codes(verdict: dict) -> dict[str, dict]:
    return {d["code"]: d for d in verdict["diagnostics"]}


# ------------------------------------------------------------------------------ HTTP API


def test_upload_with_byte_order_mark_and_latin1_comment(client, auth, api_stores):
    raw = b"\xef\xbb\xbf" + "! 25 °C\n".encode("latin-1") + _tank_text().encode("ascii")
    response = client.post("/v1/batches", headers=auth, content_type="multipart/form-data",
                           data={"map": json.dumps(_map()), "files": [(io.BytesIO(raw), "t.s1p")]})
    assert response.status_code == 202, response.get_json()
    (check_id,) = response.get_json()["check_ids"]
    (verdict,) = run_worker(api_stores.checks, [check_id])
    plain = run_worker(api_stores.checks, [client.post("/v1/checks", headers=auth, json={
        **_map(), "touchstone": _tank_text()}).get_json()["id"]])[0]
    assert verdict["verdict"] == plain["verdict"] and verdict["ndf"] == plain["ndf"]


def test_utf16_upload_is_named(client, auth):
    raw = _tank_text().encode("utf-16")
    problem = client.post("/v1/batches", headers=auth, content_type="multipart/form-data",
                          data={"map": json.dumps(_map()),
                                "files": [(io.BytesIO(raw), "t.s1p")]}).get_json()
    assert problem["status"] == 422
    assert problem["errors"][0]["field"] == "files.0" and "UTF-16" in problem["errors"][0]["detail"]


@pytest.mark.parametrize("r_text", ["1e400", "1E999"])
def test_non_finite_r_is_a_422_naming_it(client, auth, r_text):
    text = _tank_text().replace("R 50", f"R {r_text}")
    problem = client.post("/v1/checks", headers=auth,
                          json={**_map(), "touchstone": text}).get_json()
    assert problem["status"] == 422
    (error,) = problem["errors"]
    assert error["field"] == "touchstone" and "finite" in error["detail"] and "R" in error["detail"]


def test_comment_references_reach_the_verdict(client, auth, api_stores):
    text = _with_port_impedance(_tank_text(), "75 0")
    ids = [client.post("/v1/checks", headers=auth, json={**_map(), "touchstone": text}
                       ).get_json()["id"],
           client.post("/v1/checks", headers=auth, json={
               **_map(), "touchstone": text, "options": {"reference_from_comments": True}}
           ).get_json()["id"]]
    warned, taken = run_worker(api_stores.checks, ids)
    note = _codes(warned)[CODE]
    assert note["severity"] == "warning" and note["details"]["reference_used_ohm"] == [50.0]
    assert "reference_from_comments" in note["message"]
    assumed = _codes(taken)[CODE]
    assert assumed["severity"] == "info" and assumed["details"]["reference_used_ohm"] == [75.0]
    # the same S read against 75 ohm is another circuit: Y = (1 - S) / (75 (1 + S)) (Pozar,
    # 4th ed., sec. 4.3), so the driving-point admittance the verdict reports differs
    assert warned["nodes"][0]["min_re_admittance_s"] != taken["nodes"][0]["min_re_admittance_s"]
    agreeing = client.post("/v1/checks", headers=auth, json={
        **_map(), "touchstone": _with_port_impedance(_tank_text(), "50 0")}).get_json()["id"]
    assert CODE not in _codes(run_worker(api_stores.checks, [agreeing])[0])


def test_reference_from_comments_that_cannot_be_taken_is_named(client, auth):
    text = _with_port_impedance(_tank_text(), "75 5")
    problem = client.post("/v1/checks", headers=auth, json={
        **_map(), "touchstone": text, "options": {"reference_from_comments": True}}).get_json()
    assert problem["status"] == 422
    assert problem["errors"][0]["field"] == "options.reference_from_comments"


# ----------------------------------------------------------------------------- command line


def _files(tmp_path: Path, name: str, raw: bytes) -> tuple[str, str]:
    (tmp_path / name).write_bytes(raw)
    (tmp_path / "map.json").write_text(json.dumps(_map(400.0)))
    return str(tmp_path / name), str(tmp_path / "map.json")


def test_check_reads_bom_and_8_bit_comments(tmp_path, capsys):
    raw = b"\xef\xbb\xbf! Messung bei 25 \xb0C\n" + _tank_text(400.0).encode("ascii")
    file, map_file = _files(tmp_path, "tank.s1p", raw)
    assert main(["check", file, "--map", map_file]) == 1  # R = 400 ohm: unstable (closed form)
    assert json.loads(capsys.readouterr().out)["unstable_count"] == 2


def test_check_refuses_an_extension_with_the_wrong_port_count(tmp_path, capsys):
    file, map_file = _files(tmp_path, "tank.s2p", _tank_text(400.0).encode("ascii"))
    assert main(["check", file, "--map", map_file]) == 3
    err = capsys.readouterr().err
    assert "tank.s2p" in err and "says 2 ports" in err and "1-port" in err


def test_check_refuses_a_non_finite_r(tmp_path, capsys):
    text = _tank_text(400.0).replace("R 50", "R 1e400")
    file, map_file = _files(tmp_path, "tank.s1p", text.encode("ascii"))
    assert main(["check", file, "--map", map_file]) == 3
    assert "finite" in capsys.readouterr().err


def test_submit_refuses_an_extension_with_the_wrong_port_count_before_uploading(
        tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("BALLAST_CONFIG", str(tmp_path / "absent.toml"))
    file, map_file = _files(tmp_path, "tank.s4p", _tank_text(400.0).encode("ascii"))
    # port 9 answers nothing: the command must stop at the file, before any request is made
    assert main(["submit", file, "--map", map_file, "--url", "http://127.0.0.1:9"]) == 3
    err = capsys.readouterr().err
    assert "tank.s4p" in err and "says 4 ports" in err
