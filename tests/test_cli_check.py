"""``ballast check``: verdict JSON on stdout only, exit codes 0/1/2/3, errors on stderr.

Circuit: a parallel RLC tank with a transconductance feeding back on it (closed form:
Y(jω) = G − gm + jωC + 1/(jωL); natural frequencies −(G − gm)/2C ± j√(1/LC − ((G − gm)/2C)²),
so the tank is unstable exactly when gm > G — a circuit-theory identity, common practice).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from tests.support.json_requests import GM_TANK_F0_HZ, gm_tank_request
from workers.lumped import s_from_y, to_touchstone


def ballast(*args: str) -> subprocess.CompletedProcess[str]:
    exe = Path(sys.executable).with_name("ballast")
    command = [str(exe)] if exe.exists() else [sys.executable, "-m", "service"]
    return subprocess.run([*command, *args], capture_output=True, text=True, timeout=120,
                          check=False)


@pytest.mark.parametrize(("gm", "verdict", "code"), [(0.5e-3, "stable", 0), (2e-3, "unstable", 1)])
def test_exit_code_follows_verdict(tmp_path: Path, gm: float, verdict: str, code: int) -> None:
    path = tmp_path / "tank.json"
    path.write_text(json.dumps(gm_tank_request(gm)))
    done = ballast("check", str(path))
    assert done.returncode == code, done.stderr
    body = json.loads(done.stdout)  # stdout holds the verdict JSON and nothing else
    assert body["verdict"] == verdict
    assert body["unstable_count"] == (2 if verdict == "unstable" else 0)
    if verdict == "unstable":
        assert body["modes"][0]["frequency_hz"] == pytest.approx(GM_TANK_F0_HZ, rel=5e-3)


def test_band_above_the_oscillation_is_indeterminate(tmp_path: Path) -> None:
    path = tmp_path / "tank.json"
    path.write_text(json.dumps(gm_tank_request(2e-3, f_lo=2 * GM_TANK_F0_HZ)))
    done = ballast("check", str(path))
    assert done.returncode == 2
    body = json.loads(done.stdout)
    assert body["verdict"] == "indeterminate"
    assert "band_low_open" in {d["code"] for d in body["diagnostics"]}


def test_bad_input_exit_3_with_field_on_stderr(tmp_path: Path) -> None:
    payload = gm_tank_request(2e-3)
    payload["devices"][0]["control"] = ["gate", None]
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(payload))
    done = ballast("check", str(path))
    assert done.returncode == 3
    assert done.stdout == ""
    assert "devices.0.control" in done.stderr
    assert "Traceback" not in done.stderr


def test_touchstone_with_map(tmp_path: Path) -> None:
    payload = gm_tank_request(2e-3)
    f = np.asarray(payload["frequency_hz"])
    y = np.asarray(payload["data"]["re"]) + 1j * np.asarray(payload["data"]["im"])
    (tmp_path / "tank.s1p").write_text(to_touchstone(f, s_from_y(y, 50.0), 50.0))
    mapping = {k: payload[k] for k in ("ports", "devices", "options")}
    (tmp_path / "map.json").write_text(json.dumps(mapping))
    done = ballast("check", str(tmp_path / "tank.s1p"), "--map", str(tmp_path / "map.json"))
    assert done.returncode == 1, done.stderr
    assert json.loads(done.stdout)["unstable_count"] == 2


def test_touchstone_syntax_error_names_line(tmp_path: Path) -> None:
    (tmp_path / "broken.s1p").write_text(
        "# GHz S RI R 50\n1.0 0.5 0.1\n2.0 0.5 oops\n3.0 0.1 0.1\n")
    (tmp_path / "map.json").write_text(json.dumps({
        "ports": [{"name": "a", "role": "probe"}],
        "devices": [{"name": "Q", "gm_s": 0.01, "control": ["a", None], "output": [None, "a"]}]}))
    done = ballast("check", str(tmp_path / "broken.s1p"), "--map", str(tmp_path / "map.json"))
    assert done.returncode == 3
    assert "touchstone" in done.stderr and "line 3" in done.stderr


def test_touchstone_without_map_is_refused(tmp_path: Path) -> None:
    (tmp_path / "x.s1p").write_text("# GHz S RI R 50\n1 0 0\n2 0 0\n3 0 0\n")
    done = ballast("check", str(tmp_path / "x.s1p"))
    assert done.returncode == 3
    assert "--map" in done.stderr
