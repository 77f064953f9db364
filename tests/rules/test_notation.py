"""The one position notation: round trip and one-line refusals (common practice: a parser
and printer of the same format must invert each other)."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st
from zeckenum.errors import InputError
from zeckenum.rules.notation import annotate_position, format_position, parse_position


@given(st.lists(st.integers(min_value=0, max_value=10**6), max_size=12))
def test_format_then_parse_gives_back_the_counts_without_trailing_zeros(counts):
    text = format_position(counts)
    assert " " not in text
    expected = list(counts)
    while expected and expected[-1] == 0:
        expected.pop()
    assert list(parse_position(text)) == expected


def test_the_forms_are_the_documented_ones():
    assert format_position([3, 1, 0, 2, 0, 0]) == "3,1,0,2"
    assert format_position([]) == "0"
    assert parse_position(" [3, 1,0 ,2] ") == (3, 1, 0, 2)
    # 3*1 + 1*2 + 2*5 = 15 with the Fibonacci values 1, 2, 3, 5 (common practice)
    assert annotate_position((3, 1, 0, 2), (1, 2, 3, 5, 8)) == "3,1,0,2 (3*1 + 1*2 + 2*5 = 15)"


@pytest.mark.parametrize(
    "text", ["", "1,,2", "1,-2", "a", "1.5", "1,2,3,4,5,6,7,8,1", "1," + "9" * 20])
def test_malformed_positions_are_refused_in_one_line(text):
    with pytest.raises(InputError) as e:
        parse_position(text, nbins=8)
    assert "\n" not in str(e.value)
    assert "position" in str(e.value)
