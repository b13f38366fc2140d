"""Pattern text format: reader, writer, round trip and errors."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from placer.errors import PatternError
from placer.io.pattern import (
    DUMMY,
    EMPTY,
    check_against_spec,
    format_pattern,
    parse_pattern,
    unit_positions,
)
from placer.jobs.load import parse_spec


def test_parse_ignores_comments_blank_lines_and_tabs():
    p = parse_pattern("# header\n\nA>\tB< .\n  # more\nB  A -\n")
    assert p.devices == ("A", "B")
    assert p.ids.tolist() == [[0, 1, DUMMY], [1, 0, EMPTY]]
    assert p.orient.tolist() == [[1, -1, 0], [0, 0, 0]]


def test_slot_coordinates_follow_the_format():
    """Format rule: slot (r, c) sits at x = c * pitch_x, y = -r * pitch_y."""
    xy, dev = unit_positions(parse_pattern(". A\nB -"), (2.0, 3.0))
    assert xy.tolist() == [[2.0, 0.0], [0.0, -3.0]]
    assert dev.tolist() == [0, 1]


@pytest.mark.parametrize("text, match", [
    ("A B\nA B A", r"p.txt:2: row has 3 tokens, expected 2"),
    ("A B\nA B>>", r"p.txt:2: token 2 'B>>' is not a device name"),
    ("A 1B", r"token 2 '1B'"),
    ("A B*", r"token 2 'B\*'"),
    ("# only comments\n\n", r"p.txt: no rows"),
    (". . -", r"no device units"),
    ("A a", r"'A' and 'a' differ only by case"),
])
def test_parse_pattern_rejects_bad_rows(text, match):
    with pytest.raises(PatternError, match=match):
        parse_pattern(text, "p.txt")


def test_counts_must_agree_with_spec():
    spec = parse_spec("[devices]\nA = 2\nB = 2\n", "s.toml")
    with pytest.raises(PatternError,
                       match="p.txt: device 'B' has 1 units, the spec s.toml says 2"):
        check_against_spec(parse_pattern("A B A"), spec, "p.txt")
    with pytest.raises(PatternError, match=r"device 'C' is not in the spec"):
        check_against_spec(parse_pattern("A B A B C"), spec, "p.txt")
    p = check_against_spec(parse_pattern("B A A B"), spec, "p.txt")
    assert p.devices == ("A", "B") and p.ids.tolist() == [[1, 0, 0, 1]]


_token = st.one_of(st.sampled_from([".", "-"]),
                   st.tuples(st.sampled_from(["A", "Bb", "c_1", "IOUT2"]),
                             st.sampled_from(["", ">", "<"])).map("".join))


@given(st.integers(1, 5), st.integers(1, 7), st.data())
def test_reader_and_writer_round_trip_exactly(rows, cols, data):
    """Format contract: parse(format(p)) == p and format is a fixed point."""
    cells = data.draw(st.lists(_token, min_size=rows * cols, max_size=rows * cols))
    cells[0] = "A"
    text = "\n".join(" ".join(cells[r * cols:(r + 1) * cols]) for r in range(rows))
    p = parse_pattern(text)
    out = format_pattern(p, header=["made by a test"])
    assert parse_pattern(out) == p
    assert format_pattern(parse_pattern(out), header=["made by a test"]) == out
    assert np.array_equal(parse_pattern(out).ids, p.ids)
