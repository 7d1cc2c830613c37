"""Codecs of prompted line protocols, on text literals (rules from PROTOCOLS.md §2)."""

from __future__ import annotations

import re

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from lineproof.drivers import line_protocol
from lineproof.drivers.ieee488 import CodecError

ERROR = line_protocol.compile_error_pattern(r"^\?(?P<code>\d+) (?P<text>.*)$")


def test_error_lines() -> None:
    assert line_protocol.parse_error_line("?21 points out of range 2..201", ERROR) == (21, "points out of range 2..201")
    assert line_protocol.parse_error_line("took 201 in 40 ms", ERROR) is None


@pytest.mark.parametrize("pattern", [r"(", r"^\?(\d+) (.*)$"])
def test_error_pattern_needs_code_and_text_groups(pattern: str) -> None:
    with pytest.raises(CodecError):
        line_protocol.compile_error_pattern(pattern)


def test_echo_may_follow_the_power_on_prompt() -> None:
    line_protocol.strip_echo("hello", "hello", "S2> ")
    line_protocol.strip_echo("S2> hello", "hello", "S2> ")
    with pytest.raises(CodecError, match="echoed"):
        line_protocol.strip_echo("helo", "hello", "S2> ")


def test_rows() -> None:
    rows = line_protocol.parse_rows(["144000000 0.1 -0.2", "1.46e8 -1e-3 2.5E-2", "end 2"], 3, "end")
    np.testing.assert_array_equal(rows, [[144e6, 0.1, -0.2], [146e6, -1e-3, 0.025]])
    assert line_protocol.parse_rows(["end 0"], 1, "end").shape == (0, 1)


@pytest.mark.parametrize(
    ("lines", "message"),
    [
        ([], "no rows"),
        (["1 2 3"], "do not end"),
        (["1 2 3", "end 2"], "announces 2 rows, 1 came"),
        (["1 2", "end 1"], "row 1 is not 3 numbers"),
        (["1 2 3 4", "end 1"], "row 1 is not 3 numbers"),
        (["1 nan 3", "end 1"], "row 1"),
        (["1 2 3", "end two"], "whole count"),
        (["1 2 3", "end 1", "1 2 3"], "do not end"),
    ],
)
def test_bad_rows_are_errors(lines: list[str], message: str) -> None:
    with pytest.raises(CodecError, match=re.escape(message)):
        line_protocol.parse_rows(lines, 3, "end")


@given(st.lists(st.tuples(*[st.floats(allow_nan=False, allow_infinity=False, width=64)] * 3), max_size=40),
       st.integers(min_value=-3, max_value=3))
def test_rows_round_trip_and_count_check(values: list[tuple[float, float, float]], skew: int) -> None:
    lines = [" ".join(repr(v) for v in row) for row in values] + [f"end {max(0, len(values) + skew)}"]
    if max(0, len(values) + skew) != len(values):
        with pytest.raises(CodecError):
            line_protocol.parse_rows(lines, 3, "end")
    else:
        np.testing.assert_array_equal(line_protocol.parse_rows(lines, 3, "end").reshape(-1, 3),
                                      np.array(values, dtype=float).reshape(-1, 3))
