"""workers.engine.samples: new frequency samples merged into a check request.

Oracle: the lumped simulator (``workers.lumped``) sampled directly on the union of the two
frequency sets; the port data at each frequency do not depend on which other frequencies are
simulated, so a merge of S data in the same form must give exactly that request, and its verdict
exactly that verdict. S and Y are related by Y = Z0^(-1/2)(I − S)(I + S)^(-1)Z0^(-1/2) (Pozar,
Microwave Engineering, 4th ed., sec. 4.3).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from tests.support.sweeps import generated, request_at, samples_at
from workers.engine import run_check
from workers.engine.conversions import port_admittance
from workers.engine.errors import InputError
from workers.engine.request import Network
from workers.engine.samples import AddedSamples, merge_samples

CIRCUIT = generated("lna", 3)  # oscillates at about 145 MHz (eig)
OLD_HZ = np.geomspace(100e6, 30e9, 201)
NEW_HZ = np.concatenate([np.geomspace(1e6, 99e6, 40), OLD_HZ[50:53]])  # three given twice


def test_merged_s_data_equal_the_circuit_sampled_on_the_union():
    merged = merge_samples(request_at(CIRCUIT, OLD_HZ), samples_at(CIRCUIT, NEW_HZ))
    direct = request_at(CIRCUIT, np.union1d(OLD_HZ, NEW_HZ))
    np.testing.assert_array_equal(merged.frequency_hz, direct.frequency_hz)
    np.testing.assert_array_equal(merged.network.values, direct.network.values)
    for a, b in zip(merged.devices, direct.devices, strict=True):
        np.testing.assert_array_equal(a.gm_s, b.gm_s)
    assert run_check(merged).to_dict() == run_check(direct).to_dict()


def test_y_samples_merge_with_s_data_through_port_admittance():
    new = samples_at(CIRCUIT, NEW_HZ)
    as_y = AddedSamples(new.frequency_hz,
                        Network("Y", port_admittance(new.network).values, new.network.z0_ohm))
    merged = merge_samples(request_at(CIRCUIT, OLD_HZ), as_y)
    direct = request_at(CIRCUIT, np.union1d(OLD_HZ, NEW_HZ))
    assert merged.network.parameter == "Y"
    np.testing.assert_allclose(merged.network.values, port_admittance(direct.network).values,
                               rtol=1e-9, atol=1e-15)


def test_a_repeated_frequency_that_disagrees_is_named():
    new = samples_at(CIRCUIT, OLD_HZ[50:53])
    values = new.network.values.copy()
    values[1] *= 1.001  # a different bias point at one repeated frequency
    with pytest.raises(InputError) as err:
        merge_samples(request_at(CIRCUIT, OLD_HZ),
                      replace(new, network=replace(new.network, values=values)))
    assert err.value.field == "frequency_hz" and f"{OLD_HZ[51]:.12g} Hz" in err.value.message


def test_a_repeated_frequency_within_the_tolerance_is_kept_once():
    new = samples_at(CIRCUIT, OLD_HZ[50:53])
    values = new.network.values * (1 + 1e-9)  # below consistency_tolerance (1e-6)
    merged = merge_samples(request_at(CIRCUIT, OLD_HZ),
                           replace(new, network=replace(new.network, values=values)))
    assert merged.frequency_hz.size == OLD_HZ.size
    np.testing.assert_array_equal(merged.network.values, request_at(CIRCUIT, OLD_HZ).network.values)


def test_a_device_whose_gm_varies_needs_its_values_at_the_new_frequencies():
    old = request_at(CIRCUIT, OLD_HZ)
    varying = replace(old, devices=tuple(replace(d, gm_s=d.gm_s * np.linspace(1, 1.01,
                                                                            OLD_HZ.size))
                                         for d in old.devices))
    new = samples_at(CIRCUIT, NEW_HZ[:5])
    with pytest.raises(InputError) as err:
        merge_samples(varying, new)
    assert err.value.field.startswith("gm_s.")
    given = {d.name: np.full(5, 0.05 + 0j) for d in old.devices}
    merged = merge_samples(varying, replace(new, gm_s=given))
    assert merged.devices[0].gm_s[0] == 0.05


def test_gain_off_data_must_come_with_the_samples_when_the_check_has_it():
    old = request_at(CIRCUIT, OLD_HZ)
    with_off = replace(old, gain_off=old.network)
    with pytest.raises(InputError) as err:
        merge_samples(with_off, samples_at(CIRCUIT, NEW_HZ))
    assert err.value.field == "gain_off"
