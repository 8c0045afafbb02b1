"""``ballast check request.json --add more.json``: new samples merged locally, as the service's
``POST /v1/checks/{id}/samples`` does.

Oracle: the lumped circuit simulated directly on the union of the frequency sets, run through the
engine (the verdict must be the same JSON).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np

from tests.support.sweeps import generated, request_at
from workers.engine import run_check

CIRCUIT = generated("lna", 3)
OLD_HZ = np.geomspace(100e6, 30e9, 201)
NEW_HZ = np.geomspace(1e6, 99e6, 40)
TOP_HZ = np.geomspace(30.5e9, 300e9, 60)


def ballast(*args: str) -> subprocess.CompletedProcess[str]:
    exe = Path(sys.executable).with_name("ballast")
    command = [str(exe)] if exe.exists() else [sys.executable, "-m", "service"]
    return subprocess.run([*command, *args], capture_output=True, text=True, timeout=120,
                          check=False)


def _samples(f: np.ndarray) -> dict:
    full = CIRCUIT.case.check_request(f)
    return {key: full[key] for key in ("frequency_hz", "parameters", "data", "z0_ohm")}


def test_added_samples_give_the_verdict_of_the_union(tmp_path: Path):
    (tmp_path / "request.json").write_text(json.dumps(CIRCUIT.case.check_request(OLD_HZ)))
    (tmp_path / "low.json").write_text(json.dumps(_samples(NEW_HZ)))
    (tmp_path / "top.json").write_text(json.dumps(_samples(TOP_HZ)))
    done = ballast("check", str(tmp_path / "request.json"), "--add", str(tmp_path / "low.json"),
                   "--add", str(tmp_path / "top.json"))
    union = np.union1d(np.union1d(OLD_HZ, NEW_HZ), TOP_HZ)
    expected = run_check(request_at(CIRCUIT, union)).to_dict()
    assert json.loads(done.stdout) == json.loads(json.dumps(expected))
    assert done.returncode == {"stable": 0, "unstable": 1, "indeterminate": 2}[
        expected["verdict"]]


def test_disagreeing_samples_are_exit_3_naming_the_file_and_frequency(tmp_path: Path):
    (tmp_path / "request.json").write_text(json.dumps(CIRCUIT.case.check_request(OLD_HZ)))
    body = _samples(OLD_HZ[:3])
    body["data"]["im"][2][0][0] += 0.5
    (tmp_path / "again.json").write_text(json.dumps(body))
    done = ballast("check", str(tmp_path / "request.json"), "--add", str(tmp_path / "again.json"))
    assert done.returncode == 3 and done.stdout == ""
    assert "again.json: frequency_hz:" in done.stderr and f"{OLD_HZ[2]:.12g} Hz" in done.stderr
