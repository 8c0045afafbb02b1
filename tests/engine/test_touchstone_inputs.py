"""Touchstone files as tools write them (issue 13 part 1), checked against the specification.

Sources, cited beside each check:
- TS1.1: Touchstone File Format Specification Version 1.1, EIA/IBIS Open Forum (2002). Its
  two-port noise example is QUOTED FROM MEMORY (the PDF was not at hand); the rules used (option
  line, comments from '!' to the line end, noise records of five numbers after the first
  frequency that does not increase) are common practice and match scikit-rf 2.2's reader.
- TS2: Touchstone(R) File Format Specification Version 2.0, IBIS Open Forum, 2009: the
  [Matrix Format] 4-port example (as in test_touchstone.py) and the [Noise Data] layout, both
  QUOTED FROM MEMORY.
- scikit-rf 2.2 as a reference reader: it also takes per-port impedances from
  '! Port Impedance' comment lines, and it ships a few Touchstone files (a local corpus check).
Other files here are written to those rules for the case at hand.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import skrf

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone import parse_touchstone

# TS1.1 two-port example with noise parameters (quoted from memory).
TS11_NOISE_EXAMPLE = (
    "!2-port network, S-parameter and noise data\n"
    "!Default MA format, GHz frequencies\n"
    "# GHz S MA R 50\n"
    "!2-port S-parameter data\n"
    "2 .95 -26 3.57 157 .04 76 .66 -14\n"
    "22 .60 -144 1.30 40 .14 40 .56 -85\n"
    "!NOISE PARAMETERS\n"
    "4 .7 .64 69 .38\n"
    "18 2.7 .46 -33 .40\n"
)

# TS2 [Matrix Format] Full example, 4 ports, rows on their own lines (quoted from memory).
TS2_FULL_HEAD = (
    "[Version] 2.0\n# GHz S MA R 50\n[Number of Ports] 4\n[Number of Frequencies] 1\n"
    "[Reference] 50 75 0.01 0.01\n[Matrix Format] Full\n[Network Data]\n"
)
TS2_FULL_ROWS = [
    "5.00000 0.60 161.24 0.40 -42.20 0.42 -66.58 0.53 -79.34 !row 1",
    "0.40 -42.20 0.60 161.20 0.53 -79.34 0.42 -66.58 !row 2",
    "0.42 -66.58 0.53 -79.34 0.60 161.24 0.40 -42.20 !row 3",
    "0.53 -79.34 0.42 -66.58 0.40 -42.20 0.60 161.24 !row 4",
]


def _ts2_full(rows: list[str]) -> str:
    return TS2_FULL_HEAD + "\n".join(rows) + "\n[End]\n"


def _error(text: str | bytes, **kwargs: object) -> TouchstoneError:
    with pytest.raises(TouchstoneError) as caught:
        parse_touchstone(text, **kwargs)  # type: ignore[arg-type]
    return caught.value


# ----------------------------------------------------------------------------- text encodings


@pytest.mark.parametrize("form", ["str", "bytes"])
def test_utf8_byte_order_mark_is_accepted(form: str) -> None:
    # A UTF-8 byte-order mark (U+FEFF, EF BB BF) before the first comment: the file is the same.
    plain = parse_touchstone(TS11_NOISE_EXAMPLE)
    marked = "\ufeff" + TS11_NOISE_EXAMPLE
    parsed = parse_touchstone(marked if form == "str" else marked.encode("utf-8"))
    np.testing.assert_array_equal(parsed.values, plain.values)
    np.testing.assert_array_equal(parsed.frequency_hz, plain.frequency_hz)


@pytest.mark.parametrize("encoding", ["latin-1", "cp1252", "utf-8", "mac-roman"])
def test_comments_in_any_8_bit_encoding(encoding: str) -> None:
    # TS1.1/TS2: a comment runs from '!' to the end of the line and is ignored, so only keywords
    # and data need be ASCII; a degree sign or a micro sign in a comment changes nothing.
    text = "! measured at 25 °C, bias 3 V / 12 µA\n" + TS11_NOISE_EXAMPLE.replace(
        "!NOISE PARAMETERS", "!NOISE PARAMETERS at 25 °C")
    parsed = parse_touchstone(text.encode(encoding))
    np.testing.assert_array_equal(parsed.values, parse_touchstone(TS11_NOISE_EXAMPLE).values)


def test_non_ascii_outside_a_comment_names_its_line() -> None:
    error = _error("# GHz S RI R 50\n1 0.5 0\n2 0,5° 0\n".encode("latin-1"))
    assert error.line == 3 and "ASCII" in error.message


def test_utf16_is_refused_with_a_clear_message() -> None:
    error = _error("# GHz S RI R 50\n1 0.5 0\n".encode("utf-16"))
    assert "UTF-16" in error.message


# ------------------------------------------------------------------------------ noise records


def test_ts11_noise_example_reads() -> None:
    parsed = parse_touchstone(TS11_NOISE_EXAMPLE, filename="amp.s2p")
    assert parsed.frequency_hz.tolist() == [2e9, 22e9]


@pytest.mark.parametrize(
    ("damaged", "replacement", "words"),
    [
        ("4 .7 .64 69 .38", "4 .7 .64 69", "needs 5 numbers"),  # Rn left out
        ("18 2.7 .46 -33 .40", "18 2.7 .46 -33 .40 .1", "needs 5 numbers"),  # one too many
        ("18 2.7 .46 -33 .40", "3 2.7 .46 -33 .40", "increase"),  # frequency falls
    ],
)
def test_version1_noise_records_are_checked(damaged: str, replacement: str, words: str) -> None:
    # TS1.1: each noise record is one line: frequency, NFmin (dB), |Γopt|, ∠Γopt, Rn.
    text = TS11_NOISE_EXAMPLE.replace(damaged, replacement)
    error = _error(text)
    assert error.line == text.splitlines().index(replacement) + 1
    assert words in error.message


def _ts2_noise(noise_lines: list[str], declared: int = 2) -> str:
    return (
        "[Version] 2.0\n# GHz S MA R 50\n[Number of Ports] 2\n[Two-Port Data Order] 12_21\n"
        f"[Number of Frequencies] 2\n[Number of Noise Frequencies] {declared}\n"
        "[Reference] 50 25.0\n[Network Data]\n"
        "2 .95 -26 3.57 157 .04 76 .66 -14\n22 .60 -144 1.30 40 .14 40 .56 -85\n"
        "[Noise Data]\n" + "\n".join(noise_lines) + "\n[End]\n"
    )


def test_version2_noise_records_are_checked() -> None:
    # TS2 [Noise Data]: [Number of Noise Frequencies] records of five numbers each.
    good = ["4 .7 .64 69 19", "18 2.7 .46 -33 20"]
    assert parse_touchstone(_ts2_noise(good)).nports == 2
    short = _error(_ts2_noise(["4 .7 .64 69 19", "18 2.7 .46 -33"]))
    assert short.line == 13 and "needs 5 numbers" in short.message
    counted = _error(_ts2_noise(good, declared=3))
    assert "Number of Noise Frequencies] is 3" in counted.message


# -------------------------------------------------------------------- multi-line v2 records


@pytest.mark.parametrize("row", [1, 2, 3])
def test_version2_error_names_the_faulty_continuation_line(row: int) -> None:
    # TS2 [Matrix Format] Full 4-port example with one number missing from row `row`+1: the
    # error must name that line (line 9 + row), not the record's first line (line 8).
    rows = list(TS2_FULL_ROWS)
    words = rows[row].split("!")[0].split()
    rows[row] = " ".join(words[:-1])
    text = _ts2_full(rows)
    error = _error(text)
    assert error.line == 8 + row, error.message
    assert "expected 8 numbers" in error.message and "found 7" in error.message


def test_version2_later_record_is_checked_against_the_first_records_layout() -> None:
    # Two records written with three pairs per line (a layout the writer chose); the second
    # record's third line is short, and the error names it.
    head = ("[Version] 2.0\n# GHz S RI R 50\n[Number of Ports] 3\n[Number of Frequencies] 2\n"
            "[Network Data]\n")
    record = ["{f} 1 0 2 0 3 0", "4 0 5 0 6 0", "7 0 8 0 9 0"]
    second = [line.format(f=2) for line in record]
    second[2] = "7 0 8 0 9"
    text = head + "\n".join([line.format(f=1) for line in record] + second) + "\n[End]\n"
    error = _error(text)
    assert error.line == 11 and "found 5" in error.message


def test_missing_end_says_add_end() -> None:
    # TS2: a Version 2.0 file ends with [End].
    error = _error(_ts2_full(TS2_FULL_ROWS).replace("[End]\n", ""))
    assert "add [End]" in error.message


# --------------------------------------------------------------------------------- file names


def _v1_file(nports: int) -> str:
    """A Version 1.0 file written to TS1.1's rules: each row on new lines, four pairs a line."""
    rows = []
    for r in range(nports):
        pairs = [f"{0.01 * (r + 1):g} {0.001 * c:g}" for c in range(nports)]
        rows.extend(" ".join(pairs[k:k + 4]) for k in range(0, nports, 4))
    lines = []
    for f in (1, 2):
        lines.append(f"{f} {rows[0]}")
        lines.extend(rows[1:])
    return "# GHz S RI R 50\n" + "\n".join(lines) + "\n"


def test_extension_that_disagrees_with_the_data_is_rejected() -> None:
    # issue 13: 8-port data in x.s4p was accepted; the .sNp extension names the port count.
    text = _v1_file(8)
    assert parse_touchstone(text, filename="amp.s8p").nports == 8
    assert parse_touchstone(text).nports == 8
    error = _error(text, filename="x.s4p")
    assert error.line == 2 and "says 4 ports" in error.message and "8-port" in error.message


def test_version2_port_count_must_match_the_extension() -> None:
    text = _ts2_full(TS2_FULL_ROWS)
    assert parse_touchstone(text, filename="four.ts").nports == 4
    assert parse_touchstone(text, filename="four.s4p").nports == 4
    error = _error(text, filename="four.s2p")
    assert "says 2 ports" in error.message and "[Number of Ports] is 4" in error.message


# -------------------------------------------------------------------------- reference values


@pytest.mark.parametrize(
    "text",
    [
        "# GHz S RI R 1e400\n1 0 0\n",
        "[Version] 2.0\n# GHz S RI R 50\n[Number of Ports] 1\n[Reference] 1e999\n",
    ],
    ids=["option line", "[Reference]"],
)
def test_non_finite_reference_is_rejected(text: str) -> None:
    # TS1.1/TS2: R (and [Reference]) is a positive resistance in ohms; 1e400 overflows.
    error = _error(text)
    assert "finite" in error.message and error.line in (1, 4)


# ----------------------------------------------------------------- references in comments


def _with_comment_impedances(impedance: str, nports: int = 2) -> str:
    """A 2-port file written to TS1.1's rules whose ports' impedances appear only in
    '! Port Impedance' comment lines after each record (the form scikit-rf 2.2 reads)."""
    return (
        "! field-solver style export\n# GHz S RI R 50\n"
        "1 0.1 0.01 0.8 -0.1 0.8 -0.1 0.2 0.02\n"
        f"! Port Impedance {impedance}\n"
        "2 0.12 0.02 0.7 -0.2 0.7 -0.2 0.22 0.03\n"
        f"! Port Impedance {impedance}\n"
    )


def test_comment_references_that_differ_are_reported(tmp_path: Path) -> None:
    text = _with_comment_impedances("25 0 35 0")
    parsed = parse_touchstone(text)
    assert parsed.z0_ohm.tolist() == [50.0, 50.0]  # TS: comments carry no data
    (note,) = parsed.notes
    assert note.code == "touchstone_comment_references" and note.severity == "warning"
    assert "50 ohm" in note.message and "25, 35" in note.message
    assert note.details["reference_used_ohm"] == [50.0, 50.0]
    # Reference reader: scikit-rf 2.2 takes the same per-port values from these comments.
    path = tmp_path / "solver.s2p"
    path.write_text(text)
    np.testing.assert_allclose(skrf.Network(str(path)).z0[0].real, [25.0, 35.0])


def test_comment_references_taken_on_request(tmp_path: Path) -> None:
    text = _with_comment_impedances("25 0 35 0")
    parsed = parse_touchstone(text, reference_from_comments=True)
    assert parsed.z0_ohm.tolist() == [25.0, 35.0]
    (note,) = parsed.notes
    assert note.severity == "info" and "reference_from_comments" in note.message
    path = tmp_path / "solver.s2p"
    path.write_text(text)
    reference = skrf.Network(str(path))  # scikit-rf 2.2 reads S with the comment references
    np.testing.assert_allclose(parsed.values, reference.s, rtol=1e-15)
    np.testing.assert_allclose(parsed.z0_ohm, reference.z0[0].real, rtol=1e-15)


def test_comment_references_full_matrix_form_and_continuation_lines() -> None:
    # The N x N form, wrapped over a continuation comment line: only the diagonal is per port.
    text = _with_comment_impedances("25 0 0 0\n! 0 0 35 0")
    assert parse_touchstone(text, reference_from_comments=True).z0_ohm.tolist() == [25.0, 35.0]


def test_comment_references_equal_to_r_say_nothing() -> None:
    assert parse_touchstone(_with_comment_impedances("50 0 50 0")).notes == ()


def test_complex_comment_references_cannot_be_taken() -> None:
    text = _with_comment_impedances("25 3 35 0")
    (note,) = parse_touchstone(text).notes  # still reported
    assert note.severity == "warning" and "complex" in note.message
    error = _error(text, reference_from_comments=True)
    assert error.field == "options.reference_from_comments" and error.line == 4


def test_taking_references_without_any_in_the_comments_is_reported() -> None:
    parsed = parse_touchstone(TS11_NOISE_EXAMPLE, reference_from_comments=True)
    (note,) = parsed.notes
    assert note.severity == "info" and parsed.z0_ohm.tolist() == [50.0, 50.0]


# ------------------------------------------------------------- local corpus (scikit-rf data)


_SKRF_DATA = Path(skrf.__file__).parent / "data"
_CORPUS = sorted(p for p in _SKRF_DATA.glob("*") if p.suffix.lower() in (".s1p", ".s2p", ".s3p"))


@pytest.mark.parametrize("path", _CORPUS, ids=[p.name for p in _CORPUS])
def test_files_shipped_with_scikit_rf_read_alike(path: Path) -> None:
    # Local check only: the Touchstone files installed with scikit-rf 2.2, read by both readers.
    reference = skrf.Network(str(path))
    parsed = parse_touchstone(path.read_bytes(), filename=path.name)
    np.testing.assert_allclose(parsed.frequency_hz, reference.f, rtol=1e-15)
    np.testing.assert_allclose(parsed.values, reference.s, rtol=1e-13, atol=1e-300)
