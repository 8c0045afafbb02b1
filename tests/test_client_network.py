"""scikit-rf networks in: ``request_from_network``, ``BallastClient.check_network`` and
``ballast submit`` with scikit-rf's own (JSON) network files, against the real app on a socket.

Oracles, named beside each check:
- the parallel G, L, C tank's closed form (tests/support/json_requests.py: stable for
  g = −3 mS, oscillating for g = −8 mS at ≈ 3.557 GHz);
- the RC phase-shift oscillator's textbook critical gain A = 29 (Sedra & Smith, from memory;
  ``workers.lumped.families.phase_shift_oscillator``): A = 28 stable, A = 30 oscillating, at
  the frequency of the eig of its MNA pencil (``CircuitCase.natural_frequencies``, SciPy);
- scikit-rf 2.2's own values: ``Network.f``, ``.s``, ``.z0`` for the round trips,
  ``Network.renormalize`` for data referenced to other impedances per port, ``Network.y``
  (its s2y with per-port z0) for what a per-port z0 means, ``skrf.io.general.to_json_string``
  for its JSON network file, and its Touchstone reader for the Network path of a circuit.
"""

from __future__ import annotations

import json
import pickle
import re
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import skrf
from skrf.io.general import to_json_string

from service.cli import EXIT_ERROR, EXIT_UNSTABLE, main
from service.client import BallastClient, ClientConfig, ClientError, request_from_network
from service.client_network import PACK_ABOVE_VALUES
from service.intake import load_request
from service.schemas.request import is_packed
from tests.client_live_server import cli_live_server
from tests.support.json_requests import (
    RLC_SHORT_BAND_HZ,
    rlc_tank_frequency_hz,
    rlc_tank_request,
)
from workers.engine.conversions import port_admittance
from workers.lumped.checkdata import to_touchstone
from workers.lumped.families import phase_shift_oscillator

RNG = np.random.default_rng(20260613)
PHASE_SHIFT_BAND_HZ = np.geomspace(1e6, 1e12, 801)  # 801 × 2 × 2 S values: packed arrays
TWO_PROBES = [{"name": "a", "role": "probe"}, {"name": "b", "role": "probe"}]


@pytest.fixture
def server(tmp_path: Path, monkeypatch: pytest.MonkeyPatch):
    with cli_live_server(tmp_path, monkeypatch) as live:
        yield live


def client_for(live) -> BallastClient:
    return BallastClient(ClientConfig(url=live.url, token=live.token))


def s_of(request: dict) -> np.ndarray:
    return np.asarray(request["data"]["re"]) + 1j * np.asarray(request["data"]["im"])


def network(f: np.ndarray, s: np.ndarray, z0=50.0) -> skrf.Network:
    return skrf.Network(frequency=skrf.Frequency.from_f(f, unit="hz"), s=s, z0=z0)


def random_network(points: int, ports: int, z0) -> skrf.Network:
    f = np.sort(RNG.uniform(1e6, 2e10, points))
    shape = (points, ports, ports)
    s = 0.4 * (RNG.normal(size=shape) + 1j * RNG.normal(size=shape))
    return network(f, s, z0)


def submit_and_wait(client: BallastClient, request: dict) -> dict:
    return client.wait_check(client.submit_check(request)["id"], poll_s=0.05)


# --- the same circuit three ways ------------------------------------------------------------------

@pytest.mark.parametrize(("g_neg_s", "expected"), [(-3e-3, "stable"), (-8e-3, "unstable")])
def test_touchstone_json_and_network_give_the_same_verdict(server, tmp_path, g_neg_s, expected):
    request = rlc_tank_request(g_neg_s, RLC_SHORT_BAND_HZ)
    f = np.asarray(request["frequency_hz"])
    path = tmp_path / "tank.s1p"
    path.write_text(to_touchstone(f, s_of(request)), encoding="utf-8")
    mapping = {"ports": request["ports"], "devices": request["devices"]}
    client = client_for(server)
    checks = {
        "json": submit_and_wait(client, request),
        "touchstone": submit_and_wait(client, {**mapping,
                                               "touchstone": path.read_text(encoding="utf-8")}),
        # the Network as scikit-rf's own Touchstone reader makes it from the same file
        "network": client.check_network(skrf.Network(str(path)), poll_s=0.05, **mapping),
    }
    verdicts = {how: check["verdict"] for how, check in checks.items()}
    assert all(check["status"] == "done" for check in checks.values()), checks
    assert {how: v["verdict"] for how, v in verdicts.items()} == dict.fromkeys(checks, expected)
    assert len({v["unstable_count"] for v in verdicts.values()}) == 1
    if expected == "unstable":
        # closed form: the tank's natural frequency (≈ 3.557 GHz), within 1 % on every path
        for v in verdicts.values():
            assert v["unstable_count"] == 2 and v["modes"][0]["frequency_hz"] == pytest.approx(
                rlc_tank_frequency_hz(g_neg_s), rel=0.01)


@pytest.mark.parametrize(("gain", "expected"), [(28.0, "stable"), (30.0, "unstable")])
def test_network_with_its_own_z0_per_port_gives_the_verdict_of_its_50_ohm_data(
        server, gain, expected):
    """The phase-shift oscillator's 50 Ω data renormalised by scikit-rf to 25 Ω and 100 Ω is
    the same circuit: same verdict as the 50 Ω JSON request, and the textbook one. This runs
    the per-port, packed path through the API; with open probe ports only, this verdict does not
    tell z0 values apart (tried: read as 50 Ω it stays the same), so what z0 means is checked
    against scikit-rf's Y below."""
    case = phase_shift_oscillator(gain)
    request = case.check_request(PHASE_SHIFT_BAND_HZ)
    renormalised = network(PHASE_SHIFT_BAND_HZ, s_of(request), 50.0)
    renormalised.renormalize([25.0, 100.0])
    sent = request_from_network(renormalised, request["ports"], request["devices"])
    assert sent["z0_ohm"] == [25.0, 100.0] and is_packed(sent["data"])
    client = client_for(server)
    by_json = submit_and_wait(client, request)["verdict"]
    by_network = client.check_network(renormalised, request["ports"], request["devices"],
                                      poll_s=0.05)["verdict"]
    assert by_json["verdict"] == by_network["verdict"] == expected
    assert by_json["unstable_count"] == by_network["unstable_count"]
    if expected == "unstable":  # eig of the MNA pencil: the growing pair at ≈ 3.95 GHz
        growing = [s for s in case.natural_frequencies() if s.real > 0 and s.imag > 0]
        assert len(growing) == 1 and by_network["unstable_count"] == 2
        assert by_network["modes"][0]["frequency_hz"] == pytest.approx(
            growing[0].imag / (2 * np.pi), rel=0.01)


# --- request_from_network against scikit-rf's own values ------------------------------------------

@pytest.mark.parametrize("points", [20, 400])  # 20·9 values as lists, 400·9 packed
def test_request_round_trips_frequencies_s_and_z0_exactly(points):
    ntwk = random_network(points, 3, [50.0, 75.0, 35.5])
    request = request_from_network(ntwk, [*TWO_PROBES, {"name": "c", "role": "external"}],
                                   devices=[], gain_off=ntwk)
    assert is_packed(request["data"]) == is_packed(request["frequency_hz"]) == (
        points * 9 > PACK_ABOVE_VALUES)
    loaded = load_request(json.loads(json.dumps(request)))  # through the wire's JSON text
    # scikit-rf 2.2's own arrays, bit for bit
    assert np.array_equal(loaded.frequency_hz, ntwk.f)
    assert np.array_equal(loaded.network.values, ntwk.s)
    assert np.array_equal(loaded.network.z0_ohm, ntwk.z0[0].real)
    assert np.array_equal(loaded.gain_off.values, ntwk.s)


def test_z0_that_differs_per_port_means_what_scikit_rf_means():
    """Y of the loaded request (the engine's S → Y) against scikit-rf's ``Network.y`` for the same
    S and z0 = [50, 75] Ω (power waves; equal to pseudo-waves for real z0)."""
    ntwk = random_network(30, 2, [50.0, 75.0])
    loaded = load_request(request_from_network(ntwk, TWO_PROBES, devices=[], gain_off=ntwk))
    assert loaded.network.z0_ohm.tolist() == [50.0, 75.0]
    np.testing.assert_allclose(port_admittance(loaded.network).values, ntwk.y,
                               rtol=1e-12, atol=1e-15)
    same_z0 = load_request(request_from_network(network(ntwk.f, ntwk.s, 50.0), TWO_PROBES,
                                                devices=[], gain_off=ntwk))
    assert not np.allclose(port_admittance(same_z0.network).values, ntwk.y)  # z0 matters


def test_any_object_with_f_s_z0_gives_the_request_a_network_gives():
    ntwk = random_network(10, 2, 50.0)
    duck = SimpleNamespace(f=ntwk.f.tolist(), s=ntwk.s, z0=50)  # scikit-rf's z0 is (F, N) complex
    options = {"phase_step_limit_deg": 60.0}
    assert request_from_network(duck, TWO_PROBES, options=options, gain_off={"touchstone": "x"}) \
        == request_from_network(ntwk, TWO_PROBES, options=options, gain_off={"touchstone": "x"})


# --- error paths ----------------------------------------------------------------------------------

def test_wrong_port_count_is_refused_with_both_counts():
    with pytest.raises(ValueError, match=r"ports lists 1 port\(s\) but the network has 2"):
        request_from_network(random_network(5, 2, 50.0), TWO_PROBES[:1])


@pytest.mark.parametrize("thing", [{"f": [1.0], "s": [[[0.0]]], "z0": 50.0}, np.zeros((3, 1, 1)),
                                   SimpleNamespace(f=[1.0, 2.0], s=np.zeros((2, 1, 1)))])
def test_object_that_is_no_network_is_refused_naming_what_it_lacks(thing):
    with pytest.raises(TypeError, match=r"scikit-rf Network or have \.f, \.s and \.z0"):
        request_from_network(thing, TWO_PROBES[:1])


def test_complex_or_frequency_dependent_z0_is_refused():
    complex_z0 = random_network(5, 2, 50.0)
    complex_z0.z0 = np.array([50.0 + 5j, 50.0])  # scikit-rf keeps it: a complex reference
    with pytest.raises(ValueError, match="z0 is complex"):
        request_from_network(complex_z0, TWO_PROBES)
    drifting = random_network(5, 2, 50.0)
    drifting.z0 = np.linspace(40.0, 60.0, 5)[:, None] * np.ones((1, 2))
    with pytest.raises(ValueError, match="z0 changes with frequency"):
        request_from_network(drifting, TWO_PROBES)


@pytest.mark.parametrize(("duck", "words"), [
    (SimpleNamespace(f=[1.0, 2.0], s=np.zeros((3, 2, 2)), z0=50.0), "shape (F, N, N)"),
    (SimpleNamespace(f=[1.0, 2.0], s=np.zeros((2, 2, 2)), z0=[50.0, 0.0]), "positive"),
    (SimpleNamespace(f=[1.0, 2.0], s=np.zeros((2, 2, 2)), z0=[50.0] * 3), "one per port (2)"),
    (SimpleNamespace(f=[1j, 2.0], s=np.zeros((2, 2, 2)), z0=50.0), "real frequencies"),
])
def test_shapes_and_values_that_do_not_fit_are_refused(duck, words):
    with pytest.raises(ValueError, match=words.replace("(", r"\(").replace(")", r"\)")):
        request_from_network(duck, TWO_PROBES)


def test_gain_off_network_at_other_frequencies_is_refused():
    on = random_network(5, 2, 50.0)
    off = network(on.f * 1.5, on.s, 50.0)
    with pytest.raises(ValueError, match="gain_off must have the network's ports and frequencies"):
        request_from_network(on, TWO_PROBES, gain_off=off)


# --- ballast submit with scikit-rf's own network files --------------------------------------------

def tank_files(folder: Path) -> tuple[dict, dict[str, Path]]:
    """The map and one scikit-rf JSON network file per tank (to_json_string, scikit-rf 2.2)."""
    folder.mkdir(parents=True, exist_ok=True)
    files = {}
    for g_neg_s in (-3e-3, -8e-3):
        request = rlc_tank_request(g_neg_s, RLC_SHORT_BAND_HZ)
        path = folder / f"tank_{-g_neg_s * 1e3:.0f}mS.json"
        path.write_text(to_json_string(network(RLC_SHORT_BAND_HZ, s_of(request))),
                        encoding="utf-8")
        files[path.name] = path
    mapping = {"ports": request["ports"], "devices": request["devices"]}
    return mapping, files


def test_submit_takes_scikit_rf_network_files_beside_touchstone(server, tmp_path, capsys):
    mapping, _ = tank_files(tmp_path / "designs")
    map_file = tmp_path / "designs" / "map.json"  # in the glob's folder: left out as the map
    map_file.write_text(json.dumps(mapping), encoding="utf-8")
    stable = rlc_tank_request(-3e-3, RLC_SHORT_BAND_HZ)
    touchstone = tmp_path / "designs" / "tank_3mS.s1p"
    touchstone.write_text(to_touchstone(RLC_SHORT_BAND_HZ, s_of(stable)), encoding="utf-8")
    report = tmp_path / "report"
    code = main(["submit", str(tmp_path / "designs" / "*.json"), str(touchstone),
                 "--map", str(map_file), "--wait", "--report-dir", str(report)])
    out, err = capsys.readouterr()
    assert code == EXIT_UNSTABLE, err  # closed form: the −8 mS tank oscillates
    assert "3 variant(s)" in err and all(name in out for name in (
        "tank_3mS.json", "tank_8mS.json", "tank_3mS.s1p"))
    batch_id = re.search(r"batch (bat_\S+)", err).group(1)
    client = client_for(server)
    verdicts = {item["label"]: item["verdict"] for item in client.iter_batch_checks(batch_id)}
    assert verdicts == {"tank_3mS.json": "stable", "tank_8mS.json": "unstable",
                        "tank_3mS.s1p": "stable"}
    # the report draws the unstable variant's plots from its request (S data and z0 as sent)
    pages = [(report / link).read_text(encoding="utf-8") for link in re.findall(
        r'href="(checks/[^"]+\.html)"', (report / "index.html").read_text(encoding="utf-8"))]
    unstable = [page for page in pages if "tank_8mS.json" in page]
    assert len(pages) == 3 and unstable and 'id="plot-ndf"' in unstable[0]


def test_submit_without_scikit_rf_names_the_file_and_the_extra(server, tmp_path, capsys,
                                                               monkeypatch):
    mapping, files = tank_files(tmp_path / "designs")
    map_file = tmp_path / "map.json"
    map_file.write_text(json.dumps(mapping), encoding="utf-8")
    monkeypatch.setitem(sys.modules, "skrf", None)  # import skrf now raises ImportError
    monkeypatch.setitem(sys.modules, "skrf.io.general", None)
    code = main(["submit", str(files["tank_3mS.json"]), "--map", str(map_file)])
    err = capsys.readouterr().err
    assert code == EXIT_ERROR
    assert "tank_3mS.json" in err and "needs scikit-rf" in err and "ballast[rf]" in err


class _Trap:
    """Unpickling this touches a marker file: a pickle that is read leaves a trace."""

    def __init__(self, marker: Path) -> None:
        self.marker = marker

    def __reduce__(self):
        return (Path.touch, (self.marker,))


@pytest.mark.parametrize("name", ["amp.ntwk", "amp.p"])
def test_submit_never_unpickles_scikit_rf_pickles(server, tmp_path, capsys, name):
    marker = tmp_path / "unpickled"
    path = tmp_path / name
    path.write_bytes(pickle.dumps(_Trap(marker)))
    map_file = tmp_path / "map.json"
    map_file.write_text(json.dumps({"ports": TWO_PROBES[:1]}), encoding="utf-8")
    code = main(["submit", str(path), "--map", str(map_file)])
    err = capsys.readouterr().err
    assert code == EXIT_ERROR and name in err
    assert not marker.exists()


def test_submit_refuses_json_that_is_no_scikit_rf_network(server, tmp_path, capsys):
    request_file = tmp_path / "request.json"
    request_file.write_text(json.dumps(rlc_tank_request(-3e-3, RLC_SHORT_BAND_HZ)),
                            encoding="utf-8")
    map_file = tmp_path / "map.json"
    map_file.write_text(json.dumps({"ports": TWO_PROBES[:1]}), encoding="utf-8")
    code = main(["submit", str(request_file), "--map", str(map_file)])
    err = capsys.readouterr().err
    assert code == EXIT_ERROR
    assert "request.json" in err and "not a scikit-rf network file" in err


def test_submit_names_the_network_file_whose_port_count_the_map_contradicts(server, tmp_path,
                                                                            capsys):
    _, files = tank_files(tmp_path / "designs")
    map_file = tmp_path / "map.json"
    map_file.write_text(json.dumps({"ports": TWO_PROBES}), encoding="utf-8")
    code = main(["submit", str(files["tank_8mS.json"]), "--map", str(map_file)])
    err = capsys.readouterr().err
    assert code == EXIT_ERROR
    assert "tank_8mS.json: the network has 1 port(s) but the map lists 2" in err


def test_check_network_gives_up_after_its_timeout(server):
    """A check held in the queue never finishes: check_network says so after timeout_s."""
    server.queue.hold()
    ntwk = network(RLC_SHORT_BAND_HZ, s_of(rlc_tank_request(-3e-3, RLC_SHORT_BAND_HZ)))
    request = rlc_tank_request(-3e-3, RLC_SHORT_BAND_HZ)
    with pytest.raises(ClientError, match=r"not finished after 0.2 s \(status queued\)"):
        client_for(server).check_network(ntwk, request["ports"], request["devices"],
                                         poll_s=0.05, timeout_s=0.2)
    server.queue.release()


def test_client_works_without_scikit_rf():
    """service.client imports and converts a duck-typed network with ``import skrf`` failing."""
    code = ("import sys; sys.modules['skrf'] = None\n"
            "import numpy as np\nfrom types import SimpleNamespace\n"
            "from service.client import BallastClient, request_from_network\n"
            "net = SimpleNamespace(f=[1e9, 2e9, 3e9], s=np.zeros((3, 1, 1)), z0=50.0)\n"
            "r = request_from_network(net, [{'name': 'a', 'role': 'probe'}])\n"
            "assert r['z0_ohm'] == [50.0]\n"
            "print('ok')\n")
    done = subprocess.run([sys.executable, "-W", "error", "-c", code], capture_output=True,
                          text=True, timeout=120, cwd=Path(__file__).resolve().parents[1])
    assert done.returncode == 0 and done.stdout.strip() == "ok", done.stderr
