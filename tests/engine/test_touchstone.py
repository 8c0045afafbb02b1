"""Touchstone reader checks against outside references.

Sources, cited beside each check:
- TS2: Touchstone(R) File Format Specification Version 2.0, IBIS Open Forum, 24 April 2009 (the
  sections named are that document's own headings). The Version 2.0 Y/Z rule is quoted from TS2
  page 7 ("Option Line") as reproduced verbatim in a public users' mailing-list post; the PDF
  itself was not available to us.
- scikit-rf 2.2 (``skrf``) as the reference reader/writer for S data, where it follows TS2.
- Closed-form arithmetic (dB = 20*log10|s|, angles in degrees: TS2 "Option Line").
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pytest
import skrf

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone import (
    TouchstoneData,
    parse_touchstone,
)

SEED = 20261202
RTOL = 1e-12


def _random_network(nports: int, points: int, seed: int) -> skrf.Network:
    rng = np.random.default_rng(seed)
    shape = (points, nports, nports)
    s = rng.normal(size=shape) + 1j * rng.normal(size=shape)
    frequency = skrf.Frequency(0.5, 18.0, points, unit="GHz")
    return skrf.Network(frequency=frequency, s=s, z0=50.0)


# --------------------------------------------------------------------- round trips with skrf 2.2


@pytest.mark.parametrize("form", ["ri", "ma", "db"])
@pytest.mark.parametrize("nports", [1, 2, 3, 4])
def test_round_trip_against_scikit_rf(tmp_path: Path, nports: int, form: str) -> None:
    # Reference: scikit-rf 2.2 writes Touchstone 1.0 S data (Network.write_touchstone) and reads
    # it back (skrf.Network(file)); for S data both follow TS2, so ours must agree with both.
    network = _random_network(nports, 41, SEED + 10 * nports + len(form))
    network.write_touchstone("dut", dir=tmp_path, form=form)
    path = tmp_path / f"dut.s{nports}p"
    text = path.read_text()
    reference = skrf.Network(str(path))
    for parsed in (parse_touchstone(text, filename=path.name), parse_touchstone(text)):
        assert parsed.version == "1.0" and parsed.parameter == "S" and parsed.nports == nports
        assert parsed.values.shape == (41, nports, nports)
        np.testing.assert_allclose(parsed.values, reference.s, rtol=RTOL, atol=0)
        np.testing.assert_allclose(parsed.values, network.s, rtol=RTOL, atol=0)
        np.testing.assert_allclose(parsed.frequency_hz, reference.f, rtol=RTOL, atol=0)
        np.testing.assert_allclose(parsed.z0_ohm, np.full(nports, 50.0), rtol=0, atol=0)


def test_five_port_rows_wrap_at_four_pairs(tmp_path: Path) -> None:
    # TS2 "5-port and Above Networks": a row longer than four pairs continues on the next line;
    # scikit-rf 2.2 writes it that way, and the port count is inferred from the first record.
    network = _random_network(5, 7, SEED)
    network.write_touchstone("five", dir=tmp_path, form="ri")
    text = (tmp_path / "five.s5p").read_text()
    parsed = parse_touchstone(text)
    assert parsed.nports == 5
    np.testing.assert_allclose(parsed.values, network.s, rtol=RTOL, atol=0)


# ------------------------------------------------------------------ closed-form MA / DB / units


@pytest.mark.parametrize(
    ("option", "pair", "expected"),
    [
        # MA: magnitude and angle in degrees (TS2 "Option Line"): 2 at 180 deg is -2.
        ("MA", "2 180", -2.0 + 0.0j),
        ("MA", "0.5 -45", 0.5 * (1 - 1j) / math.sqrt(2)),
        ("MA", "1 90", 1j),
        # DB: 20*log10|s| and angle in degrees: 20 dB is |s| = 10; 0 dB at 30 deg is e^(j30 deg).
        ("DB", "20 0", 10.0 + 0.0j),
        ("DB", "0 30", complex(math.cos(math.pi / 6), math.sin(math.pi / 6))),
        ("DB", "-6.020599913279624 90", 0.5j),  # 20*log10(0.5) = -6.0206 dB
        ("RI", "0.25 -0.75", 0.25 - 0.75j),
    ],
)
def test_format_conversion_closed_form(option: str, pair: str, expected: complex) -> None:
    parsed = parse_touchstone(f"# GHz S {option} R 50\n1.0 {pair}\n")
    assert parsed.values[0, 0, 0] == pytest.approx(expected, rel=1e-14, abs=1e-15)


@pytest.mark.parametrize(
    ("unit", "hz"), [("Hz", 1.0), ("kHz", 1e3), ("MHz", 1e6), ("GHz", 1e9), ("mhz", 1e6)]
)
def test_frequency_units(unit: str, hz: float) -> None:
    # TS2 "Option Line": units Hz, kHz, MHz, GHz; files are case-insensitive.
    parsed = parse_touchstone(f"# {unit} s ri r 50\n1.5 0 0\n2.5 0 0\n")
    np.testing.assert_allclose(parsed.frequency_hz, [1.5 * hz, 2.5 * hz], rtol=1e-15)


def test_option_line_defaults() -> None:
    # TS2 "Option Line": an option line with no fields means GHz, S, MA, R 50.
    parsed = parse_touchstone("#\n2 0.5 90\n")
    assert parsed.parameter == "S"
    assert parsed.frequency_hz[0] == 2e9
    assert parsed.values[0, 0, 0] == pytest.approx(0.5j, abs=1e-16)
    assert parsed.z0_ohm.tolist() == [50.0]


# -------------------------------------------------------------------------- Y / Z normalisation


def test_version1_y_is_divided_by_r_not_multiplied() -> None:
    # TS2 "Option Line" / Example 9 (Version 1.0): data are normalised to the reference
    # resistance R. A normalised admittance is y = Y / (1/R) = Y*R (common practice: normalised
    # admittance is Y/Y0 with Y0 = 1/R0), so y = 1 with R 50 is Y = 1/50 = 0.02 S.
    text = "# GHz Y RI R 50\n1 1 0\n2 1 0\n"
    parsed = parse_touchstone(text)
    np.testing.assert_allclose(parsed.values[:, 0, 0], [0.02, 0.02], rtol=1e-15)


def test_scikit_rf_2_2_reads_version1_y_as_if_it_were_z(tmp_path: Path) -> None:
    # The known scikit-rf 2.2 bug we avoid: it multiplies every v1 Y/Z file by z0, so y = 1 with
    # R 50 comes back as 50 S instead of the 0.02 S TS2's normalisation rule gives (test above).
    path = tmp_path / "y.s1p"
    path.write_text("# GHz Y RI R 50\n1 1 0\n2 1 0\n")
    theirs = skrf.Network(str(path)).y[:, 0, 0]
    ours = parse_touchstone(path.read_text(), filename=path.name).values[:, 0, 0]
    np.testing.assert_allclose(theirs, [50.0, 50.0], rtol=1e-12)
    np.testing.assert_allclose(ours, [0.02, 0.02], rtol=1e-15)


def test_version1_z_spec_example_9() -> None:
    # TS2 Example 9 (Version 1.0), 1-port Z in MA with R 75; the spec says "Z11 is normalized to
    # 75 ohms, as given by the reference impedance (R 75)", so Z11 = 75 * z11.
    text = (
        "!1-port Z-parameter file, multiple frequency points\n"
        "# MHz Z MA R 75\n"
        "!freq magZ11 angZ11\n"
        "100 0.99 -4\n200 0.80 -22\n300 0.707 -45\n400 0.40 -62\n500 0.01 -89\n"
    )
    parsed = parse_touchstone(text)
    magnitude = np.array([0.99, 0.80, 0.707, 0.40, 0.01]) * 75.0
    angle = np.deg2rad([-4, -22, -45, -62, -89])
    np.testing.assert_allclose(parsed.values[:, 0, 0], magnitude * np.exp(1j * angle), rtol=1e-14)
    np.testing.assert_allclose(parsed.frequency_hz, [1e8, 2e8, 3e8, 4e8, 5e8], rtol=1e-15)
    assert parsed.parameter == "Z" and parsed.z0_ohm.tolist() == [75.0]


def test_version1_two_port_y_normalised_and_in_21_12_order() -> None:
    # TS2 "1-port and 2-port Networks": v1 two-port order N11 N21 N12 N22; Y = y / R (above).
    parsed = parse_touchstone("# GHz Y RI R 100\n1 1 0 0.25 0 0.5 0 2 0\n")
    expected = np.array([[1.0, 0.5], [0.25, 2.0]]) / 100.0
    np.testing.assert_allclose(parsed.values[0].real, expected, rtol=1e-15)


@pytest.mark.parametrize("parameter", ["Y", "Z"])
def test_version2_y_and_z_are_not_normalised(parameter: str) -> None:
    # TS2 "Option Line" (page 7): "Network data for G-, H-, Y- and Z-parameters in Version 2.0
    # files is not normalized. Therefore, the reference resistance and [Reference] keyword have
    # no impact on G-, H-, Y-, or Z-parameter data in Version 2.0 files."
    text = (
        "[Version] 2.0\n"
        f"# GHz {parameter} RI R 50\n"
        "[Number of Ports] 1\n"
        "[Number of Frequencies] 2\n"
        "[Reference] 25\n"
        "[Network Data]\n"
        "1 75 10\n"
        "2 0.5 -0.25\n"
        "[End]\n"
    )
    parsed = parse_touchstone(text)
    np.testing.assert_allclose(parsed.values[:, 0, 0], [75 + 10j, 0.5 - 0.25j], rtol=1e-15)
    assert parsed.version == "2.0" and parsed.parameter == parameter
    assert parsed.z0_ohm.tolist() == [25.0]


# --------------------------------------------------------------------------- Version 2.0 layout


def _marker(row: int, col: int) -> complex:
    """A value that names its own matrix position: row 2, column 3 -> 23 - 23j."""
    return complex(10 * row + col, -(10 * row + col))


def _pair(row: int, col: int) -> str:
    value = _marker(row, col)
    return f"{value.real:g} {value.imag:g}"


def _full_markers(nports: int) -> np.ndarray:
    return np.array([[_marker(r, c) for c in range(1, nports + 1)] for r in range(1, nports + 1)])


def _v2_file(nports: int, body: str, extra: str = "", frequencies: int = 1) -> str:
    order = "[Two-Port Data Order] 12_21\n" if nports == 2 and "Data Order" not in extra else ""
    return (
        "[Version] 2.0\n"
        "# GHz S RI R 50\n"
        f"[Number of Ports] {nports}\n"
        f"{order}{extra}"
        f"[Number of Frequencies] {frequencies}\n"
        "[Network Data]\n"
        f"{body}"
        "[End]\n"
    )


def test_version2_full_matrix_rows_in_order() -> None:
    # TS2 "3-port and 4-port Networks": data are the matrix rows in order, N11 N12 ... N1n, then
    # row 2 and so on; Version 2.0 lifts the four-pairs-per-line limit (one row per line here).
    rows = [" ".join(_pair(r, c) for c in range(1, 5)) for r in range(1, 5)]
    body = "1.0 " + "\n".join(rows) + "\n"
    parsed = parse_touchstone(_v2_file(4, body, "[Matrix Format] Full\n"))
    np.testing.assert_array_equal(parsed.values[0], _full_markers(4))


def test_version2_lower_matrix_is_mirrored() -> None:
    # TS2 "[Matrix Format]": Lower gives row i's entries N_i1 .. N_ii; the rest is symmetric.
    rows = [" ".join(_pair(r, c) for c in range(1, r + 1)) for r in range(1, 4)]
    parsed = parse_touchstone(
        _v2_file(3, "1.0 " + "\n".join(rows) + "\n", "[Matrix Format] Lower\n")
    )
    expected = _full_markers(3)
    lower = np.tril(expected)
    np.testing.assert_array_equal(parsed.values[0], lower + np.tril(lower, -1).T)


def test_version2_upper_matrix_is_mirrored() -> None:
    # TS2 "[Matrix Format]": Upper gives row i's entries N_ii .. N_in; the rest is symmetric.
    rows = [" ".join(_pair(r, c) for c in range(r, 4)) for r in range(1, 4)]
    parsed = parse_touchstone(
        _v2_file(3, "1.0 " + "\n".join(rows) + "\n", "[Matrix Format] upper\n")
    )
    upper = np.triu(_full_markers(3))
    np.testing.assert_array_equal(parsed.values[0], upper + np.triu(upper, 1).T)


def test_version2_spec_four_port_example_full_equals_lower() -> None:
    # TS2 [Matrix Format] examples: the same symmetric 4-port S data (MA) written Full and Lower,
    # with per-port references 50 75 0.01 0.01; the [Reference] arguments may span lines.
    head = "[Version] 2.0\n# GHz S MA R 50\n[Number of Ports] 4\n[Number of Frequencies] 1\n"
    full = (
        head + "[Reference] 50 75 0.01 0.01\n[Matrix Format] Full\n[Network Data]\n"
        "5.00000 0.60 161.24 0.40 -42.20 0.42 -66.58 0.53 -79.34 !row 1\n"
        "0.40 -42.20 0.60 161.20 0.53 -79.34 0.42 -66.58 !row 2\n"
        "0.42 -66.58 0.53 -79.34 0.60 161.24 0.40 -42.20 !row 3\n"
        "0.53 -79.34 0.42 -66.58 0.40 -42.20 0.60 161.24 !row 4\n[End]\n"
    )
    lower = (
        head + "[Reference] 50 75\n0.01 0.01\n[Matrix Format] Lower\n[Network Data]\n"
        "5.00000 0.60 161.24 !row 1\n"
        "0.40 -42.20 0.60 161.20 !row 2\n"
        "0.42 -66.58 0.53 -79.34 0.60 161.24 !row 3\n"
        "0.53 -79.34 0.42 -66.58 0.40 -42.20 0.60 161.24 !row 4\n[End]\n"
    )
    a, b = parse_touchstone(full), parse_touchstone(lower)
    np.testing.assert_array_equal(a.values, b.values)
    np.testing.assert_array_equal(a.z0_ohm, [50.0, 75.0, 0.01, 0.01])
    np.testing.assert_array_equal(b.z0_ohm, [50.0, 75.0, 0.01, 0.01])
    assert a.frequency_hz.tolist() == [5e9]
    assert a.values[0, 1, 1] == pytest.approx(0.60 * np.exp(1j * np.deg2rad(161.20)), rel=1e-15)


@pytest.mark.parametrize(
    ("order", "second", "third"),
    [
        # TS2 "[Two-Port Data Order]": 12_21 is N11 N12 N21 N22; 21_12 is N11 N21 N12 N22.
        ("12_21", (0, 1), (1, 0)),
        ("21_12", (1, 0), (0, 1)),
    ],
)
def test_version2_two_port_data_order(order: str, second: tuple, third: tuple) -> None:
    body = "1.0 1 0 2 0 3 0 4 0\n"
    parsed = parse_touchstone(_v2_file(2, body, f"[Two-Port Data Order] {order}\n"))
    assert parsed.values[0, 0, 0] == 1 and parsed.values[0, 1, 1] == 4
    assert parsed.values[(0, *second)] == 2 and parsed.values[(0, *third)] == 3


def test_version1_two_port_order_is_n11_n21_n12_n22() -> None:
    # TS2 "1-port and 2-port Networks": Version 1.0 two-port data are N11 N21 N12 N22.
    parsed = parse_touchstone(
        "# GHz S RI R 50\n1 "
        + " ".join(_pair(r, c) for r, c in [(1, 1), (2, 1), (1, 2), (2, 2)])
        + "\n"
    )
    np.testing.assert_array_equal(parsed.values[0], _full_markers(2))


def test_version1_two_port_noise_block_is_dropped() -> None:
    # TS2 Version 1.0 noise data: a frequency not larger than the previous one starts the noise
    # block (five numbers per line); the network data end there.
    text = (
        "# GHz S MA R 50\n"
        "2 .95 -26 3.57 157 .04 76 .66 -14\n"
        "22 .60 -144 1.30 40 .14 40 .56 -85\n"
        "! NOISE PARAMETERS\n"
        "4 .7 .64 69 .38\n"
        "18 2.7 .46 -33 .40\n"
    )
    parsed = parse_touchstone(text, filename="amp.s2p")
    assert parsed.frequency_hz.tolist() == [2e9, 22e9]
    assert parsed.values[1, 0, 1] == pytest.approx(0.14 * np.exp(1j * np.deg2rad(40)), rel=1e-15)


def test_version2_noise_data_and_information_block_are_skipped() -> None:
    # TS2 "[Noise Data]", "[Begin Information]/[End Information]".
    text = (
        "[Version] 2.0\n#\n[Number of Ports] 2\n[Two-Port Data Order] 21_12\n"
        "[Number of Frequencies] 2\n[Number of Noise Frequencies] 2\n[Reference] 50 25.0\n"
        "[Begin Information]\n[End Information]\n"
        "[Network Data]\n"
        "2 .95 -26 3.57 157 .04 76 .66 -14\n22 .60 -144 1.30 40 .14 40 .56 -85\n"
        "[Noise Data]\n4 .7 .64 69 19\n18 2.7 .46 -33 20\n[End]\n"
    )
    parsed = parse_touchstone(text)
    assert parsed.nports == 2 and parsed.frequency_hz.tolist() == [2e9, 22e9]
    assert parsed.z0_ohm.tolist() == [50.0, 25.0]
    assert parsed.values[0, 1, 0] == pytest.approx(3.57 * np.exp(1j * np.deg2rad(157)), rel=1e-15)


def test_line_endings_and_comments_anywhere() -> None:
    # TS2 general rules: CR, LF or CR/LF line ends; '!' starts a comment anywhere on a line.
    text = "! head\r\n# GHz S RI R 50 ! options\r\n1 0.5 0 ! first\r2 0.25 0\n"
    parsed = parse_touchstone(text)
    np.testing.assert_array_equal(parsed.values[:, 0, 0], [0.5, 0.25])


def test_per_port_resistances_on_the_option_line() -> None:
    # Per-port R values on the option line (TS2.1's "Version 1.1" syntax, from the IBIS TSIRD 5.1
    # issue text: "R" then one resistance per port); S data are returned unchanged.
    parsed = parse_touchstone("# GHz S RI R 50 75\n1 0.1 0 0.9 0 0.9 0 0.2 0\n")
    assert parsed.z0_ohm.tolist() == [50.0, 75.0]
    with pytest.raises(TouchstoneError, match="different R per port"):
        parse_touchstone("# GHz Z RI R 50 75\n1 0.1 0 0.9 0 0.9 0 0.2 0\n")


def test_later_option_line_in_version1_is_ignored() -> None:
    parsed = parse_touchstone("# GHz S RI R 50\n1 0.5 0\n# MHz Z MA R 75\n2 0.25 0\n")
    assert parsed.parameter == "S" and parsed.frequency_hz.tolist() == [1e9, 2e9]


def test_result_is_frozen_and_read_only() -> None:
    parsed = parse_touchstone("# GHz S RI R 50\n1 0.5 0\n")
    assert isinstance(parsed, TouchstoneData)
    with pytest.raises(dataclasses.FrozenInstanceError):
        parsed.nports = 3  # type: ignore[misc]
    with pytest.raises(ValueError):
        parsed.values[0, 0, 0] = 0


@pytest.mark.parametrize(
    "token",
    [
        "1",
        "-2.",
        ".5",
        "+3e2",
        "1E-3",
        "1.e5",
        "-.5e-2",
        "0.000123456789012345678901",
        "123456789012345678901234567",
        "1e-320",
        "-1.7976931348623157e308",
        "0.1",
        "7e+0005",
        "0." + "0" * 60 + "123456789",  # longer than the scanner's 64-byte grid
    ],
)
def test_number_grammar_matches_python_float(token: str) -> None:
    # Reference: Python's float(), correctly rounded (IEEE 754): the same value exactly.
    parsed = parse_touchstone(f"# GHz S RI R 50\n1 {token} 0\n")
    assert parsed.values[0, 0, 0].real == float(token)
