"""workers.engine.errors: engine errors are ValueErrors that name the offending field.

Oracle: the project's contract, which the service's 422 answers rest on (DEVELOPERS.md: "Engine
errors subclass ValueError (workers.engine.errors.InputError names the field)"; a Touchstone
error's line is 1-based, 0 when no line is to blame), and Python's exception hierarchy (an
``except ValueError`` must catch them). Checked also on errors the engine really raises
(two-port factors of a three-port, a negative reference impedance).
"""

from __future__ import annotations

import numpy as np
import pytest

from workers.engine.errors import InputError, TouchstoneError
from workers.engine.twoport import two_port_factors, z_to_s


def test_input_error_names_its_field():
    error = InputError("devices.1.control", "names no port")
    assert isinstance(error, ValueError)
    assert (error.field, error.message) == ("devices.1.control", "names no port")
    assert str(error) == "devices.1.control: names no port"


@pytest.mark.parametrize(("line", "field", "text"), [
    (3, "touchstone", "touchstone: line 3: expected 9 numbers"),
    (0, "touchstone", "touchstone: expected 9 numbers"),
    (12, "gain_off.touchstone", "gain_off.touchstone: line 12: expected 9 numbers"),
])
def test_touchstone_error_names_field_and_line(line, field, text):
    error = TouchstoneError(line, "expected 9 numbers", field=field)
    assert isinstance(error, InputError) and isinstance(error, ValueError)
    assert (error.line, error.field) == (line, field)
    assert error.message == text.removeprefix(f"{field}: ")
    assert str(error) == text


def test_touchstone_errors_default_to_the_touchstone_field():
    assert TouchstoneError(1, "bad option line").field == "touchstone"


def test_engine_raises_them_with_the_argument_named():
    with pytest.raises(ValueError, match=r"^s: expected shape \(F, 2, 2\)") as caught:
        two_port_factors(np.zeros((2, 3, 3), dtype=complex))
    assert isinstance(caught.value, InputError) and caught.value.field == "s"
    with pytest.raises(InputError) as caught:
        z_to_s(np.ones((2, 2, 2), dtype=complex), np.array([50.0, -50.0]))
    assert caught.value.field == "z0"
