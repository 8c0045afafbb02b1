"""``ballast submit / status / cancel / results`` against the real app on a socket.

Expected verdicts from closed forms (tests/support/json_requests.py): the parallel G, L, C tank
is stable for g = −3 mS and oscillates for g = −8 mS at ≈ 3.557 GHz (R = 200 Ω, 1 nH, 2 pF). A
band that stops at 3 GHz, below that oscillation, must not give a trusted verdict (issue 2's
contract: `indeterminate`, never `stable`). JUnit XML layout: the common
testsuites/testsuite/testcase convention read by CI systems (common practice).
"""

from __future__ import annotations

import csv
import io
import json
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from service.cli import main
from tests.client_live_server import cli_live_server
from tests.support.json_requests import (
    RLC_SHORT_BAND_HZ,
    rlc_tank_frequency_hz,
    rlc_tank_request,
)

LOW_BAND_HZ = np.geomspace(1e6, 3e9, 401)  # stops below the 3.557 GHz oscillation


@pytest.fixture
def server(tmp_path: Path, monkeypatch: pytest.MonkeyPatch):
    with cli_live_server(tmp_path, monkeypatch) as live:
        yield live


def write_requests(folder: Path, requests_by_name: dict[str, dict]) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    for name, request in requests_by_name.items():
        (folder / f"{name}.json").write_text(json.dumps(request), encoding="utf-8")
    return folder


def parse_junit(path: Path) -> tuple[ET.Element, dict[str, ET.Element]]:
    root = ET.parse(path).getroot()
    assert root.tag == "testsuites"
    cases = {case.get("name"): case for case in root.iter("testcase")}
    return root, cases


def frequency_in(message: str) -> float:
    """'… first at 3.557 GHz, …' → 3.557e9 (the client's own 'at <value> <unit>' wording)."""
    match = re.search(r"\bat ([0-9.]+) (Hz|kHz|MHz|GHz|THz)", message)
    assert match, message
    scale = {"Hz": 1, "kHz": 1e3, "MHz": 1e6, "GHz": 1e9, "THz": 1e12}[match.group(2)]
    return float(match.group(1)) * scale


def test_unstable_variant_fails_the_flow_with_a_junit_failure(server, tmp_path, capsys):
    folder = write_requests(tmp_path / "variants", {
        "tank_3mS": rlc_tank_request(-3e-3), "tank_8mS": rlc_tank_request(-8e-3)})
    junit = tmp_path / "out" / "junit.xml"
    code = main(["submit", str(folder), "--wait", "--junit", str(junit)])
    out, err = capsys.readouterr()
    assert code == 1
    assert "2/2" in err and re.search(r"checks/(s|min)", err) and "unstable 1" in err
    assert "tank_3mS.json" in out and "tank_8mS.json" in out
    root, cases = parse_junit(junit)
    assert (root.get("tests"), root.get("failures"), root.get("errors")) == ("2", "1", "0")
    assert list(cases["tank_3mS.json"]) == [cases["tank_3mS.json"].find("system-out")]
    failure = cases["tank_8mS.json"].find("failure")
    assert failure is not None and failure.get("type") == "unstable"
    message = failure.get("message")
    assert "node tank" in message and "2 right-half-plane" in message
    assert frequency_in(message) == pytest.approx(rlc_tank_frequency_hz(-8e-3), rel=0.01)


def test_all_stable_exits_0(server, tmp_path, capsys):
    folder = write_requests(tmp_path / "v", {"a": rlc_tank_request(-3e-3),
                                             "b": rlc_tank_request(-1e-3)})
    junit = tmp_path / "junit.xml"
    assert main(["submit", str(folder), "--wait", "--junit", str(junit)]) == 0
    root, _ = parse_junit(junit)
    assert (root.get("tests"), root.get("failures"), root.get("errors")) == ("2", "0", "0")


def test_band_below_the_oscillation_is_an_error_not_a_pass(server, tmp_path, capsys):
    folder = write_requests(tmp_path / "v", {
        "ok": rlc_tank_request(-3e-3), "short_band": rlc_tank_request(-8e-3, LOW_BAND_HZ)})
    junit = tmp_path / "junit.xml"
    assert main(["submit", str(folder), "--junit", str(junit)]) == 2  # --junit implies --wait
    root, cases = parse_junit(junit)
    assert (root.get("failures"), root.get("errors")) == ("0", "1")
    error = cases["short_band.json"].find("error")
    assert error.get("type") == "indeterminate"
    assert "band_high_open" in error.get("message")
    # the message names the first blocking diagnostic's frequency: the band edge (3 GHz) or, when
    # the engine's model already sees the zero above the band, the closed-form oscillation
    named = frequency_in(error.get("message"))
    assert (named == pytest.approx(3e9, rel=1e-3)
            or named == pytest.approx(rlc_tank_frequency_hz(-8e-3), rel=0.01)), named


def test_touchstone_folder_with_map_writes_the_html_report(server, tmp_path, capsys):
    from workers.lumped.checkdata import s_from_y, to_touchstone
    from workers.lumped.families import parallel_rlc_negative_g
    from workers.lumped.mna import port_admittance

    folder = tmp_path / "designs"
    folder.mkdir()
    for r_ohm in (100.0, 200.0):  # with g = −8 mS: G = +2 mS (stable), −3 mS (unstable)
        case = parallel_rlc_negative_g(r_ohm, 1e-9, 2e-12, -8e-3)
        y = port_admittance(case.circuit, case.port_nodes, RLC_SHORT_BAND_HZ)
        (folder / f"tank_{r_ohm:.0f}.s1p").write_text(
            to_touchstone(RLC_SHORT_BAND_HZ, s_from_y(y)), encoding="utf-8")
    request = rlc_tank_request(-8e-3)
    map_file = folder / "tank_map.json"  # inside the folder: must not be taken for a variant
    map_file.write_text(json.dumps({"ports": request["ports"], "devices": request["devices"]}))
    report = tmp_path / "report"
    code = main(["submit", str(folder), "--map", str(map_file), "--wait",
                 "--report-dir", str(report), "--label", "tank family"])
    assert code == 1
    index = (report / "index.html").read_text(encoding="utf-8")
    assert "tank family" in index
    links = re.findall(r'href="(checks/[^"]+\.html)"', index)
    assert len(links) == 2 and all((report / link).is_file() for link in links)
    pages = {link: (report / link).read_text(encoding="utf-8") for link in links}
    unstable = [p for p in pages.values() if "tank_200.s1p" in p]
    assert unstable and 'id="plot-ndf"' in unstable[0] and 'id="plot-admittance"' in unstable[0]
    stable = [p for p in pages.values() if "tank_100.s1p" in p]
    assert stable and 'id="plot-ndf"' not in stable[0]  # default: pictures for non-stable only


def test_results_formats_status_and_exit_codes(server, tmp_path, capsys):
    folder = write_requests(tmp_path / "v", {"s": rlc_tank_request(-3e-3),
                                             "u": rlc_tank_request(-8e-3)})
    assert main(["submit", str(folder)]) == 0
    batch_id = capsys.readouterr().out.strip()
    assert batch_id.startswith("bat_")
    from service.client import BallastClient, load_config
    BallastClient(load_config()).wait_batch(batch_id, poll_s=0.05)

    assert main(["results", batch_id, "--format", "csv"]) == 1
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert {r["label"]: r["verdict"] for r in rows} == {"s.json": "stable", "u.json": "unstable"}
    unstable = next(r for r in rows if r["label"] == "u.json")
    assert float(unstable["first_unstable_frequency_hz"]) == pytest.approx(
        rlc_tank_frequency_hz(-8e-3), rel=0.01)

    assert main(["results", batch_id, "--format", "json"]) == 1
    body = json.loads(capsys.readouterr().out)
    assert body["batch"]["id"] == batch_id and len(body["checks"]) == 2

    assert main(["results", batch_id, "--format", "table"]) == 1
    table = capsys.readouterr().out.splitlines()
    assert table[0].split()[:2] == ["variant", "verdict"] and len(table) == 4

    junit = tmp_path / "r.xml"
    assert main(["results", batch_id, "--format", "junit", "-o", str(junit)]) == 1
    root, _ = parse_junit(junit)
    assert root.get("failures") == "1"

    check_id = next(r["id"] for r in rows if r["label"] == "u.json")
    assert main(["results", check_id, "--format", "csv"]) == 1
    assert main(["status", batch_id]) == 0
    assert "finished" in capsys.readouterr().out


def test_cancel_and_failed_checks_are_errors(server, tmp_path, capsys):
    server.queue.hold()
    folder = write_requests(tmp_path / "v", {"a": rlc_tank_request(-3e-3),
                                             "b": rlc_tank_request(-3e-3),
                                             "c": rlc_tank_request(-8e-3)})
    assert main(["submit", str(folder)]) == 0
    batch_id = capsys.readouterr().out.strip()
    client_items = server.stores.checks.list_batch_checks("acme", batch_id, after=None, limit=10)[0]
    ids = {r.label: r.id for r in client_items}
    # a worker gives up on "b" (as after a time limit) and "c" runs: unstable outranks failed
    assert server.stores.checks.claim(ids["b.json"], 60.0, 3) is not None
    assert server.stores.checks.fail(ids["b.json"], "time limit exceeded")
    assert main(["cancel", ids["a.json"]]) == 0
    assert "cancelled" in capsys.readouterr().out
    assert main(["results", batch_id, "--format", "junit", "-o", str(tmp_path / "j.xml")]) == 3
    _, cases = parse_junit(tmp_path / "j.xml")
    assert cases["a.json"].find("skipped") is not None
    failed = cases["b.json"].find("error")
    assert failed.get("type") == "failed" and "time limit exceeded" in failed.get("message")
    assert cases["c.json"].find("error").get("type") == "queued"
    server.queue.release()
    from service.client import BallastClient, load_config
    BallastClient(load_config()).wait_batch(batch_id, poll_s=0.05)
    assert main(["results", batch_id, "--format", "csv"]) == 1
    assert main(["cancel", batch_id]) == 0
    assert "1 of 3 checks cancelled" in capsys.readouterr().out  # "a", cancelled earlier


def test_unreachable_server_and_bad_input_exit_3(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("BALLAST_CONFIG", str(tmp_path / "absent.toml"))
    folder = write_requests(tmp_path / "v", {"a": rlc_tank_request(-3e-3)})
    assert main(["submit", str(folder), "--url", "http://127.0.0.1:9", "--token", "x"]) == 3
    assert "ballast submit:" in capsys.readouterr().err
    assert main(["submit", str(tmp_path / "nowhere"), "--url", "http://127.0.0.1:9"]) == 3
    assert "no such file or folder" in capsys.readouterr().err
    empty = tmp_path / "empty"
    empty.mkdir()
    assert main(["submit", str(empty), "--map", str(folder / "a.json"),
                 "--url", "http://127.0.0.1:9"]) == 3
    assert "no Touchstone files" in capsys.readouterr().err


def test_progress_line_counts_and_rates():
    from service.cli.client_progress import progress_line
    from service.client import BatchProgress

    progress = BatchProgress(total=40, finished=12, by_status={"done": 11, "failed": 1},
                             by_verdict={"stable": 9, "unstable": 2}, elapsed_s=4.0)
    line = progress_line(progress, width=20)
    assert line.startswith("[" + "#" * 6 + "·" * 14 + "]")  # 12/40 of 20 cells
    assert "12/40" in line and "stable 9 · unstable 2 · indeterminate 0" in line
    assert "failed/cancelled 1" in line and "180 checks/min" in line and "~9 s left" in line
    slow = BatchProgress(total=6, finished=1, by_status={"done": 1},
                         by_verdict={"unstable": 1}, elapsed_s=120.0)
    assert "0.5 checks/min" in progress_line(slow) and "~10 min 00 s left" in progress_line(slow)


@pytest.mark.parametrize(("per_s", "text"), [
    (50.0, "3000 checks/min"), (3.1, "186 checks/min"), (1.0, "60 checks/min"),
    (0.16, "9.6 checks/min"), (0.075, "4.5 checks/min"), (1 / 720, "0.083 checks/min"),
    (0.0, "0 checks/min"),
])
def test_progress_rate_has_one_unit_whatever_the_speed(per_s: float, text: str):
    """One unit across the one-check-a-second boundary where it used to switch (issue 13)."""
    from service.cli.client_progress import format_rate

    assert format_rate(per_s) == text


def test_touchstone_without_map_names_the_file_and_what_to_add(tmp_path, capsys, monkeypatch):
    """Issue 13: this used to fail with "Expecting value: line 1 column 1 (char 0)"."""
    monkeypatch.setenv("BALLAST_CONFIG", str(tmp_path / "absent.toml"))
    folder = tmp_path / "designs"
    folder.mkdir()
    for name in ("lna_a.s8p", "lna_b.s8p"):
        (folder / name).write_text("# Hz S RI R 50\n1e9 0 0\n2e9 0 0\n3e9 0 0\n")
    (folder / "lna_map.json").write_text('{"ports": [], "devices": []}')
    unreachable = ["--url", "http://127.0.0.1:9", "--token", "x"]
    code = main(["submit", str(folder / "lna_a.s8p"), "--wait", *unreachable])
    out, err = capsys.readouterr()
    assert code == 3 and out == ""
    assert err.startswith(f"ballast submit: {folder / 'lna_a.s8p'}: a Touchstone file needs a "
                          "port/device map.")
    assert "Add --map FILE" in err and "examples/request.json" in err
    assert "Expecting value" not in err
    # a glob of several, and a folder holding Touchstone files (and a map), say the same
    assert main(["submit", str(folder / "lna_*.s8p"), *unreachable]) == 3
    assert "lna_a.s8p (and 1 more): a Touchstone file needs" in capsys.readouterr().err
    assert main(["submit", str(folder), *unreachable]) == 3
    assert "(and 1 more): a Touchstone file needs" in capsys.readouterr().err


def test_a_json_request_that_is_not_json_is_named(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("BALLAST_CONFIG", str(tmp_path / "absent.toml"))
    broken = tmp_path / "broken.json"
    broken.write_text("{")
    assert main(["submit", str(broken), "--url", "http://127.0.0.1:9", "--token", "x"]) == 3
    assert f"ballast submit: {broken}: a check request must be JSON (" in capsys.readouterr().err
