"""Touchstone reader errors: each names its line and says what is wrong; nothing else escapes.

Sources: TS2 (Touchstone(R) File Format Specification Version 2.0, IBIS Open Forum, 2009): the
rules each malformed text below breaks are those cited in test_touchstone.py (option line,
record layout, keywords and their order, [End]).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from workers.engine.errors import TouchstoneError
from workers.engine.touchstone import MAX_FREQUENCIES, MAX_PORTS, parse_touchstone

# --------------------------------------------------------------------------------- error table


def _v2(*lines: str) -> str:
    return "\n".join(lines) + "\n"


_V2_HEAD = ("[Version] 2.0", "# GHz S RI R 50", "[Number of Ports] 1", "[Number of Frequencies] 2")

ERROR_CASES = [
    # (id, text, filename, line, words in the message)
    ("bad option", "! c\n# GHz S XX R 50\n1 0 0\n", None, 2, "unknown option"),
    ("R without value", "# GHz S RI R\n1 0 0\n", None, 1, "positive resistance"),
    ("R not positive", "# GHz S RI R -5\n1 0 0\n", None, 1, "positive resistance"),
    ("H parameters", "# GHz H RI R 50\n1 0 0 0 0 0 0 0 0\n", None, 1, "H-parameters"),
    ("G parameters", "# GHz g RI R 50\n1 0 0 0 0 0 0 0 0\n", None, 1, "G-parameters"),
    ("unit twice", "# GHz MHz S\n1 0 0\n", None, 1, "twice"),
    ("data first", "\n1 0 0\n# GHz S RI R 50\n", None, 2, "option line"),
    ("no data", "! only\n# GHz S RI R 50\n! none\n", None, 2, "no network data"),
    ("empty", "", None, 0, "no option line"),
    ("not a number", "# GHz S RI R 50\n1.0 0.5 0.1\n2.0 0.5 oops\n3.0 0.1 0.1\n", None, 3, "oops"),
    ("nan", "# GHz S RI R 50\n1 0 0\n2 nan 0\n", None, 3, "not a number"),
    ("overflow", "# GHz S RI R 50\n1 0 0\n2 1e400 0\n", None, 3, "range"),
    (
        "short 2-port line",
        "# GHz S RI R 50\n1 1 0 0 0 0 0 1 0\n2 1 0 0 0 0 0 1\n3 1 0 0 0 0 0 1 0\n",
        "a.s2p",
        3,
        "expected 9",
    ),
    ("short last record", "# GHz S RI R 50\n1 1 0\n2 1\n", "a.s1p", 3, "expected 3"),
    (
        "4-port row short",
        "# GHz S RI R 50\n1 "
        + "0 0 " * 4
        + "\n"
        + "0 0 " * 4
        + "\n"
        + "0 0 " * 3
        + "\n"
        + "0 0 " * 4
        + "\n2 "
        + "0 0 " * 4
        + "\n",
        "a.s4p",
        4,
        "expected 8",
    ),
    ("not increasing", "# GHz S RI R 50\n1 0 0\n2 0 0\n2 0 0\n", None, 4, "increase"),
    (
        "3-port repeat",
        "# GHz S RI R 50\n" + ("1 " + "0 0 " * 3 + "\n" + ("0 0 " * 3 + "\n") * 2) * 2,
        None,
        5,
        "increase",
    ),
    ("negative frequency", "# GHz S RI R 50\n-1 0 0\n", None, 2, "negative"),
    ("keyword in v1", "# GHz S RI R 50\n[Number of Ports] 1\n1 0 0\n", None, 2, "Version 1.0"),
    ("no port count", "# GHz S RI R 50\n1 1 2 3 4\n", None, 2, "port count"),
    ("even first line", "# GHz S RI R 50\n1 0 0 0\n", None, 2, "frequency and whole pairs"),
    ("too many ports", "# GHz S RI R 50\n1 0 0\n", "big.s65p", 0, str(MAX_PORTS)),
    ("file says 2 ports", "# GHz S RI R 50\n1 0 0\n2 0 0\n", "a.s2p", 2, "says 2 ports"),
    ("v2 version", _v2("[Version] 3.0", "# GHz S RI R 50"), None, 1, "only 2.0"),
    ("v2 first keyword", _v2("[Number of Ports] 1"), None, 1, "[Version]"),
    ("v2 no option", _v2("[Version] 2.0", "[Number of Ports] 1"), None, 2, "option line"),
    ("v2 option late", _v2("[Version] 2.0", "[Number of Ports] 1", "# GHz"), None, 2, "option"),
    (
        "v2 missing nfreq",
        _v2(
            "[Version] 2.0",
            "# GHz S RI R 50",
            "[Number of Ports] 1",
            "[Network Data]",
            "1 0 0",
            "[End]",
        ),
        None,
        4,
        "Number of Frequencies",
    ),
    (
        "v2 missing order",
        _v2(
            "[Version] 2.0",
            "# GHz S RI R 50",
            "[Number of Ports] 2",
            "[Number of Frequencies] 1",
            "[Network Data]",
            "1 0 0 0 0 0 0 0 0",
            "[End]",
        ),
        None,
        5,
        "Two-Port Data Order",
    ),
    (
        "v2 bad order",
        _v2(
            "[Version] 2.0", "# GHz S RI R 50", "[Number of Ports] 2", "[Two-Port Data Order] 11_22"
        ),
        None,
        4,
        "12_21 or 21_12",
    ),
    ("v2 too few records", _v2(*_V2_HEAD, "[Network Data]", "1 0 0", "[End]"), None, 7, "holds 1"),
    (
        "v2 too many records",
        _v2(*_V2_HEAD, "[Network Data]", "1 0 0", "2 0 0", "3 0 0", "[End]"),
        None,
        8,
        "more frequencies",
    ),
    (
        "v2 wrong count",
        _v2(*_V2_HEAD, "[Network Data]", "1 0 0 0", "2 0 0", "[End]"),
        None,
        6,
        "expected 3 numbers",
    ),
    (
        "v2 not increasing",
        _v2(*_V2_HEAD, "[Network Data]", "2 0 0", "1 0 0", "[End]"),
        None,
        7,
        "increase",
    ),
    (
        "v2 reference short",
        _v2(
            "[Version] 2.0",
            "# GHz S RI R 50",
            "[Number of Ports] 3",
            "[Reference] 50 50",
            "[Number of Frequencies] 1",
        ),
        None,
        4,
        "[Reference] needs 3",
    ),
    (
        "v2 reference bad",
        _v2("[Version] 2.0", "# GHz S RI R 50", "[Number of Ports] 1", "[Reference] fifty"),
        None,
        4,
        "positive number",
    ),
    (
        "v2 matrix format",
        _v2("[Version] 2.0", "# GHz S RI R 50", "[Number of Ports] 1", "[Matrix Format] Diagonal"),
        None,
        4,
        "Full, Lower or Upper",
    ),
    (
        "v2 unknown keyword",
        _v2("[Version] 2.0", "# GHz S RI R 50", "[Number of Ports] 1", "[Colour] blue"),
        None,
        4,
        "unknown",
    ),
    (
        "v2 mixed mode",
        _v2(
            "[Version] 2.0",
            "# GHz S RI R 50",
            "[Number of Ports] 2",
            "[Mixed-Mode Order] D1,2 C1,2",
        ),
        None,
        4,
        "not supported",
    ),
    (
        "v2 twice",
        _v2("[Version] 2.0", "# GHz S RI R 50", "[Number of Ports] 1", "[Number of Ports] 1"),
        None,
        4,
        "twice",
    ),
    (
        "v2 ports limit",
        _v2("[Version] 2.0", "# GHz S RI R 50", "[Number of Ports] 65"),
        None,
        3,
        str(MAX_PORTS),
    ),
    (
        "v2 freq limit",
        _v2(
            "[Version] 2.0",
            "# GHz S RI R 50",
            "[Number of Ports] 1",
            f"[Number of Frequencies] {MAX_FREQUENCIES + 1}",
        ),
        None,
        4,
        str(MAX_FREQUENCIES),
    ),
    ("v2 no network data", _v2(*_V2_HEAD), None, 4, "[Network Data]"),
    ("v2 no end", _v2(*_V2_HEAD, "[Network Data]", "1 0 0", "2 0 0"), None, 7, "[End]"),
    (
        "v2 after end",
        _v2(*_V2_HEAD, "[Network Data]", "1 0 0", "2 0 0", "[End]", "3 0 0"),
        None,
        9,
        "after [End]",
    ),
    (
        "v2 noise undeclared",
        _v2(*_V2_HEAD, "[Network Data]", "1 0 0", "2 0 0", "[Noise Data]", "[End]"),
        None,
        8,
        "[Noise Data]",
    ),
    (
        "v2 option in data",
        _v2(*_V2_HEAD, "[Network Data]", "1 0 0", "# MHz", "2 0 0", "[End]"),
        None,
        7,
        "option line",
    ),
    ("v2 bad number", _v2(*_V2_HEAD, "[Network Data]", "1 0 0", "2 0 x1", "[End]"), None, 7, "x1"),
]


@pytest.mark.parametrize(
    ("text", "filename", "line", "words"),
    [case[1:] for case in ERROR_CASES],
    ids=[case[0] for case in ERROR_CASES],
)
def test_errors_name_the_line(text: str, filename: str | None, line: int, words: str) -> None:
    with pytest.raises(TouchstoneError) as caught:
        parse_touchstone(text, filename=filename)
    assert caught.value.line == line, caught.value.message
    assert words.lower() in caught.value.message.lower()
    assert isinstance(caught.value, ValueError)


def test_version1_frequency_limit() -> None:
    records = MAX_FREQUENCIES + 1
    text = "# Hz S RI R 50\n" + "".join(f"{k + 1} 0 0\n" for k in range(records))
    with pytest.raises(TouchstoneError) as caught:
        parse_touchstone(text, filename="long.s1p")
    assert str(MAX_FREQUENCIES) in caught.value.message
    assert caught.value.line == MAX_FREQUENCIES + 2  # the first record past the limit


_VALID_SAMPLES = [
    "# GHz S RI R 50\n1 0.5 0.1\n2 0.4 -0.2\n",
    "# MHz S MA R 50\n1 .9 -10 .1 80 .1 80 .8 -20\n2 .8 -20 .2 70 .2 70 .7 -30\n",
    _v2(*_V2_HEAD, "[Network Data]", "1 0 0", "2 0 0", "[End]"),
]


@settings(derandomize=True, max_examples=300, deadline=None)
@given(
    sample=st.sampled_from(_VALID_SAMPLES),
    cut=st.integers(min_value=0, max_value=200),
    insert=st.text(alphabet="0123456789.-+eE! \n#[]xRSYZ", max_size=6),
    drop=st.integers(min_value=0, max_value=4),
)
def test_mangled_text_raises_only_touchstone_errors(
    sample: str, cut: int, insert: str, drop: int
) -> None:
    # Robustness: whatever the damage, the reader either returns data or raises TouchstoneError
    # (never a bare IndexError/ValueError), and a raised error names a line inside the text.
    position = cut % (len(sample) + 1)
    text = sample[:position] + insert + sample[position + drop :]
    try:
        parsed = parse_touchstone(text)
    except TouchstoneError as error:
        assert 0 <= error.line <= text.count("\n") + 1
    else:
        assert parsed.values.shape == (parsed.frequency_hz.size, parsed.nports, parsed.nports)
        assert np.all(np.diff(parsed.frequency_hz) > 0)
