"""The simulated analyzer's ASCII trace format (PROTOCOLS.md §1): IEEE 488.2 NR3 numbers with
12 significant digits, written by numpy column by column -- checked against Python's own
correctly rounded formatting and read back by the drivers' parser."""

from __future__ import annotations

import re

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from lineproof.drivers.ieee488 import parse_number_list
from lineproof.simulators.scpi_analyzer import ascii_numbers

# IEEE 488.2 §8.7.4 NR3: an explicit sign, one digit, a point, digits, E, a signed exponent.
NR3 = re.compile(rb"^[+-][0-9]\.[0-9]{11}e[+-][0-9]{3}$")
# The simulator rounds by scaling to a whole mantissa once: within half a unit of the 12th
# digit plus the scaling's own rounding (a few parts in 1e16 of the mantissa).
HALF_UNIT_AND_A_HAIR = 0.5 + 1e-4

finite = st.floats(allow_nan=False, allow_infinity=False, allow_subnormal=False)


def _check(values: np.ndarray) -> None:
    items = ascii_numbers(values).split(b",")
    assert len(items) == values.size
    for value, item in zip(values.tolist(), items, strict=True):
        assert NR3.match(item), item
        mantissa, exponent = item.split(b"e")
        if value == 0:
            assert float(item) == 0
            continue
        assert mantissa[1:2] != b"0", item  # normalised: the first digit is not zero
        unit = 10.0 ** (int(exponent) - 11)
        assert abs(float(item) - value) <= HALF_UNIT_AND_A_HAIR * unit, (value, item)
        # and it is Python's correctly rounded .11e formatting, but for a value a hair from a tie
        reference = float(f"{value:.11e}")
        assert float(item) == reference or abs(abs(value - reference) / unit - 0.5) < 1e-4, (value, item)


@settings(max_examples=300, deadline=None)
@given(arrays(np.float64, st.integers(1, 64), elements=finite.filter(lambda v: v == 0 or abs(v) >= 1e-290)))
def test_every_finite_number_is_nr3_rounded_to_12_digits(values: np.ndarray) -> None:
    _check(values)


def test_the_format_as_written() -> None:
    assert ascii_numbers(np.array([0.0, -0.0, 1.0, -2.5e-3, 3e9, 0.123456789012345])) == (
        b"+0.00000000000e+000,-0.00000000000e+000,+1.00000000000e+000,-2.50000000000e-003,"
        b"+3.00000000000e+009,+1.23456789012e-001")


def test_the_edges_of_each_decade_and_rounding_up_to_the_next() -> None:
    powers = 10.0 ** np.arange(-289, 308)
    edges = np.concatenate([powers, np.nextafter(powers, 0), np.nextafter(powers, np.inf),
                            powers * (1 - 4e-13), powers * (1 - 6e-13), -powers * 9.9999999999951,
                            [0.0, -0.0, 1.7976931348623157e308, 123456789012.4, 0.5, 3e9]])
    _check(edges)


def test_a_trace_and_a_grid_read_back_through_the_drivers_parser() -> None:
    rng = np.random.default_rng(7)
    trace = (rng.normal(size=10001) + 1j * rng.normal(size=10001)) * 0.3
    flat = trace.view(np.float64)
    np.testing.assert_allclose(parse_number_list(ascii_numbers(flat)), flat, rtol=5.0001e-12, atol=0)
    grid = np.linspace(1e6, 3e9, 10001)
    np.testing.assert_allclose(parse_number_list(ascii_numbers(grid)), grid, rtol=5.0001e-12, atol=0)


def test_what_nr3_cannot_carry_goes_through_the_plain_format() -> None:
    # never data in a healthy trace; the drivers then refuse it rather than read a wrong number
    assert ascii_numbers(np.array([np.nan, 1.0])) == b"nan,1"
    assert ascii_numbers(np.array([1e-300, 1.0])) == b"1e-300,1"
    assert ascii_numbers(np.array([])) == b""
