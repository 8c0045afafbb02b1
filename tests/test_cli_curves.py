"""``ballast results ID --curves DIR`` and the margin pages of ``ballast submit --report-dir``,
against the real app on a socket.

Oracle: the parallel G, L, C tank with a negative conductance g (tests/support/json_requests.py,
R = 200 Ω, 1 nH, 2 pF): as a one-node circuit its NDF is the ratio of the node's admittances with
the device on and off, NDF = (G + g + jωC + 1/(jωL)) / (G + jωC + 1/(jωL)) (closed form), and its
driving-point admittance is the on one; its natural frequencies s² + (G + g)/C·s + 1/(LC) = 0 give
ζ = (G + g)/(2C ω₀) (second-order system, common practice). CSV read with Python's csv module.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
from pathlib import Path

import numpy as np
import pytest

from service.cli import main
from tests.client_live_server import cli_live_server
from tests.support.json_requests import RLC_C_F, RLC_L_H, RLC_R_OHM, rlc_tank_request

G_VALUES = {"damped": -3e-3, "grows": -8e-3}


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory):
    """One live server for the module; the command line finds it through the environment."""
    folder = tmp_path_factory.mktemp("cli-curves")
    with pytest.MonkeyPatch.context() as patch, cli_live_server(folder, patch) as live:
        yield live


def _submit(tmp_path: Path, capsys, *extra: str) -> str:
    """Submit the two tanks and wait; the batch id (from the accepted line on stderr)."""
    folder = tmp_path / "variants"
    folder.mkdir()
    for name, g in G_VALUES.items():
        (folder / f"{name}.json").write_text(json.dumps(rlc_tank_request(g)), encoding="utf-8")
    code = main(["submit", str(folder), "--wait", *extra])
    assert code == 1
    return re.search(r"batch (bat_[\w-]+) accepted", capsys.readouterr().err)[1]


def _zeta(g: float) -> float:
    return (1 / RLC_R_OHM + g) / (2 * RLC_C_F / math.sqrt(RLC_L_H * RLC_C_F))


def test_curves_of_every_check_are_written_by_label(server, tmp_path, capsys):
    batch_id = _submit(tmp_path, capsys)
    out = tmp_path / "curves"
    assert main(["results", batch_id, "--format", "csv", "--curves", str(out)]) == 1
    assert "curves of 2 check(s)" in capsys.readouterr().err
    assert sorted(p.name for p in out.iterdir()) == ["damped.json.csv", "grows.json.csv"]
    for name, g in G_VALUES.items():
        rows = list(csv.DictReader(io.StringIO((out / f"{name}.json.csv").read_text())))
        samples = [r for r in rows if r["source"] == "sample"]
        f = np.array([float(r["frequency_hz"]) for r in samples])
        w = 2 * np.pi * f
        off = 1 / RLC_R_OHM + 1j * w * RLC_C_F + 1 / (1j * w * RLC_L_H)
        ndf = np.array([complex(float(r["ndf_re"]), float(r["ndf_im"])) for r in samples])
        np.testing.assert_allclose(ndf, (off + g) / off, rtol=1e-8)
        y = np.array([complex(float(r["Y_tank_re_s"]), float(r["Y_tank_im_s"]))
                      for r in samples])
        np.testing.assert_allclose(y, off + g, rtol=1e-8)
        fk = np.array([complex(float(r["F_Gneg_re"]), float(r["F_Gneg_im"])) for r in samples])
        np.testing.assert_allclose(fk, ndf, rtol=1e-8)  # one device: F_1 = NDF


def test_curves_of_one_check(server, tmp_path, capsys):
    batch_id = _submit(tmp_path, capsys)
    from service.client import BallastClient, load_config

    check_id = next(iter(BallastClient(load_config()).iter_batch_checks(batch_id)))["id"]
    out = tmp_path / "one"
    main(["results", check_id, "--format", "json", "--curves", str(out)])
    assert len(list(out.iterdir())) == 1


def test_report_folder_has_the_margin_across_the_variants(server, tmp_path, capsys):
    report = tmp_path / "report"
    _submit(tmp_path, capsys, "--report-dir", str(report))
    rows = list(csv.DictReader(io.StringIO((report / "margin.csv").read_text())))
    assert [r["label"] for r in rows] == ["damped.json", "grows.json"]
    for row, g in zip(rows, G_VALUES.values(), strict=True):
        assert float(row["least_damping_ratio"]) == pytest.approx(_zeta(g), rel=1e-3)
    index = (report / "index.html").read_text(encoding="utf-8")
    assert 'href="margin.html"' in index and "least ζ" in index
    for page in ("margin.html", "margin-by-label.html"):
        html = (report / page).read_text(encoding="utf-8")
        assert 'href="margin.csv"' in html and 'src="data:image/svg+xml;base64,' in html
