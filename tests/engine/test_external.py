"""workers.engine.external: the external two-port (probe ports open) and its report.

Oracle: the same circuit simulated with only its two external nodes as ports (workers.lumped:
every other node, the probes included, is eliminated with no current injected, i.e. left open),
converted to S by scikit-rf 2.2's ``y2s`` with the external ports' reference impedances, and
scikit-rf's ``Network.stability`` (Rollett K) on that S. The engine instead reduces the full port
data, once by inverting Y_data and once by the Woodbury identity from the terminated Z_on.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
import skrf
from skrf.network import y2s

from tests.support.circuits import PortSpec, random_amplifier
from tests.support.requests import engine_request
from workers.engine.conversions import batched_inv, termination_admittances
from workers.engine.external import external_s, two_port_report
from workers.engine.request import CheckRequest, Network, Port
from workers.engine.verdict import Diagnostic
from workers.lumped import port_admittance as lumped_port_admittance

F_HZ = np.geomspace(1e8, 4e10, 60)


def amplifier_request(seed: int, z0_in: float = 50.0, z0_out: float = 50.0,
                      termination_ohm: tuple[float | None, float | None] = (None, None)
                      ) -> tuple[CheckRequest, np.ndarray]:
    """A random amplifier's request (ports "in", "out" external, the rest probes) with the given
    references and terminations, and the oracle: S of the lumped circuit seen at in and out."""
    rc = random_amplifier(seed)
    ports = tuple(PortSpec(p.name, p.node, p.role,
                           termination_ohm[0] if p.name == "in" else
                           termination_ohm[1] if p.name == "out" else None)
                  for p in rc.ports)
    request = engine_request(rc.circuit, ports, F_HZ)
    z0 = np.full(len(ports), 50.0)
    z0[[k for k, p in enumerate(ports) if p.name == "in"]] = z0_in
    z0[[k for k, p in enumerate(ports) if p.name == "out"]] = z0_out
    request = replace(request, network=replace(request.network, z0_ohm=z0))
    y_ext = lumped_port_admittance(rc.circuit, ["in", "out"], F_HZ)
    return request, y2s(y_ext, np.array([z0_in, z0_out]))


def terminated_z_on(request: CheckRequest) -> np.ndarray:
    y_on = request.network.values + np.diag(termination_admittances(request))
    return batched_inv(y_on).values


@pytest.mark.parametrize("seed", [0, 2, 6])
@pytest.mark.parametrize(("z0_in", "z0_out", "terms"), [
    (50.0, 50.0, (None, None)),
    (25.0, 75.0, (None, None)),
    (50.0, 50.0, (10.0, 200.0)),   # terminations other than the reference: S must not see them
])
def test_external_s_is_the_lumped_two_port_with_probes_open(seed, z0_in, z0_out, terms):
    request, expected = amplifier_request(seed, z0_in, z0_out, terms)
    for z_on in (None, terminated_z_on(request)):
        s, singular, ext = external_s(request, request.network.values, z_on)
        assert [request.ports[k].name for k in ext] == ["in", "out"]
        assert not singular.any()
        np.testing.assert_allclose(s, expected, rtol=1e-8, atol=1e-10)


def test_report_gives_the_minimum_k_of_scikit_rf():
    request, expected = amplifier_request(2)
    diagnostics: list[Diagnostic] = []
    report, (f, s, factors) = two_port_report(request, request.network.values, diagnostics)
    assert diagnostics == []
    assert report["ports"] == ["in", "out"]
    np.testing.assert_array_equal(f, F_HZ)
    np.testing.assert_allclose(s, expected, rtol=1e-8, atol=1e-10)
    k_skrf = skrf.Network(frequency=skrf.Frequency.from_f(F_HZ, unit="hz"), s=expected).stability
    assert report["k_min"] == pytest.approx(k_skrf.min(), rel=1e-7)
    assert report["k_min_hz"] == F_HZ[int(np.argmin(k_skrf))]
    np.testing.assert_allclose(factors.k, k_skrf, rtol=1e-7)


@pytest.mark.parametrize("roles", [("probe", "probe", "probe"), ("external", "probe", "probe"),
                                   ("external", "external", "external")])
def test_report_needs_exactly_two_external_ports(roles):
    y = np.broadcast_to(np.eye(3) * 0.02, (4, 3, 3)).astype(complex)
    ports = tuple(Port(f"p{k}", role) for k, role in enumerate(roles))  # type: ignore[arg-type]
    request = CheckRequest(np.linspace(1e9, 4e9, 4), Network("Y", y, np.full(3, 50.0)), ports)
    diagnostics: list[Diagnostic] = []
    assert two_port_report(request, y, diagnostics) == (None, None)
    assert [d.code for d in diagnostics] == ["two_port_unavailable"]
    assert str(roles.count("external")) in diagnostics[0].message


def test_report_without_an_impedance_matrix_says_so():
    # A lone series admittance y between the two ports, Y = [[y, −y], [−y, y]], is singular:
    # its Z-parameters do not exist (common practice), so there is no two-port to judge.
    f = np.linspace(1e9, 4e9, 5)
    y = 0.02 * np.array([[1, -1], [-1, 1]], dtype=complex)
    y = np.broadcast_to(y, (5, 2, 2)).copy()
    ports = (Port("in", "external"), Port("out", "external"))
    request = CheckRequest(f, Network("Y", y, np.full(2, 50.0)), ports)
    _, singular, _ = external_s(request, y)
    assert singular.all()
    diagnostics: list[Diagnostic] = []
    assert two_port_report(request, y, diagnostics) == (None, None)
    assert [d.code for d in diagnostics] == ["two_port_unavailable"]
    assert "singular" in diagnostics[0].message
