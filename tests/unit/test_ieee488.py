"""IEEE 488.2 / SCPI codecs on byte literals, plus property tests with hypothesis.

The clause numbers of IEEE 488.2 and SCPI-1999 in this module are cited from memory; the
byte layouts of IEEE 754 numbers are those of the standard (1.0 = 3F F0 00 ... as a double)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from lineproof.drivers import ieee488
from lineproof.drivers.ieee488 import CodecError


def test_definite_block_header() -> None:
    # IEEE 488.2 §8.7.9: '#', digit count, length digits.
    assert ieee488.parse_block_header(b"#3100") == ieee488.BlockHeader(5, 100)
    assert ieee488.parse_block_header(b"#15abcde") == ieee488.BlockHeader(3, 5)
    assert ieee488.parse_block_header(b" \n#15") == ieee488.BlockHeader(5, 5)


def test_indefinite_block_header() -> None:
    # IEEE 488.2 §8.7.10: '#0' then data up to NL^END.
    assert ieee488.parse_block_header(b"#0abc") == ieee488.BlockHeader(2, None)


@pytest.mark.parametrize("partial", [b"", b"#", b"#3", b"#31", b"#310"])
def test_incomplete_header_asks_for_more(partial: bytes) -> None:
    assert ieee488.parse_block_header(partial) is None


@pytest.mark.parametrize("bad", [b"x12", b"#a12", b"#3x00", b"12345"])
def test_malformed_header_is_an_error(bad: bytes) -> None:
    with pytest.raises(CodecError):
        ieee488.parse_block_header(bad)


def test_declared_size_above_cap_is_refused() -> None:
    with pytest.raises(CodecError, match="cap"):
        ieee488.parse_block_header(b"#9999999999", cap=1 << 20)


def test_real_payload_both_byte_orders() -> None:
    values = np.array([1.5, -2.25, 3e-9])
    for fmt in ("REAL,32", "REAL,64"):
        for order in ("big", "little"):
            payload = ieee488.encode_real_payload(values, fmt, order)
            decoded = ieee488.decode_real_payload(payload, fmt, order)
            np.testing.assert_allclose(decoded, values, rtol=1e-7 if fmt == "REAL,32" else 0)
    # 1.0 as big-endian IEEE 754 double is 3F F0 00 00 00 00 00 00.
    assert ieee488.decode_real_payload(b"\x3f\xf0\x00\x00\x00\x00\x00\x00", "REAL,64", "big")[0] == 1.0
    assert ieee488.decode_real_payload(b"\x00\x00\x80\x3f", "REAL,32", "little")[0] == 1.0


def test_ragged_payload_is_an_error() -> None:
    with pytest.raises(CodecError, match="whole number"):
        ieee488.decode_real_payload(b"\x00" * 7, "REAL,64", "big")


def test_number_list() -> None:
    np.testing.assert_array_equal(ieee488.parse_number_list(b"1,2.5,-3E+02, +.5"), [1, 2.5, -300, 0.5])
    np.testing.assert_array_equal(ieee488.parse_number_list("1 2\t3"), [1, 2, 3])
    assert ieee488.parse_number_list("").size == 0
    for bad in ("1,nan", "1,,2", "1,inf", "1,OK"):
        with pytest.raises(CodecError):
            ieee488.parse_number_list(bad)


def test_identity_and_error_entry() -> None:
    identity = ieee488.parse_identity("ACME Corp,Model 9,SN42,1.2.3\n", "TCPIP::x::1::SOCKET")
    assert (identity.manufacturer, identity.model, identity.serial, identity.firmware) == ("ACME Corp", "Model 9", "SN42", "1.2.3")
    with pytest.raises(CodecError):
        ieee488.parse_identity("only,three,fields")
    assert ieee488.parse_error_entry('0,"No error"') == (0, "No error")
    assert ieee488.parse_error_entry('-113,"Undefined header"') == (-113, "Undefined header")
    with pytest.raises(CodecError):
        ieee488.parse_error_entry("garbage")


@given(st.binary(max_size=5000))
def test_block_round_trip(payload: bytes) -> None:
    block = ieee488.encode_definite_block(payload)
    header = ieee488.parse_block_header(block)
    assert header is not None and header.payload_length == len(payload)
    assert block[header.header_length:] == payload


@given(st.binary(max_size=40))
def test_header_parser_never_crashes_on_garbage(data: bytes) -> None:
    try:
        header = ieee488.parse_block_header(data, cap=1 << 16)
    except CodecError:
        return
    if header is not None and header.payload_length is not None:
        assert 0 <= header.payload_length <= 1 << 16


@given(st.lists(st.floats(allow_nan=False, allow_infinity=False, width=64), max_size=200),
       st.sampled_from([",", ", ", " "]))
def test_number_list_round_trip(values: list[float], separator: str) -> None:
    # IEEE 488.2 §8.7.2 NR3 numbers written with 17 significant digits round-trip exactly.
    text = separator.join(f"{v:.17g}" for v in values)
    np.testing.assert_array_equal(ieee488.parse_number_list(text), np.array(values, dtype=float))


@given(st.lists(st.floats(allow_nan=False, allow_infinity=False), min_size=1, max_size=50),
       st.integers(min_value=0), st.sampled_from(["nan", "inf", "OK", "1.2.3", "", "--1", "1e", "#"]))
def test_number_list_with_garbage_is_an_error(values: list[float], where: int, junk: str) -> None:
    items = [f"{v:.17g}" for v in values]
    items.insert(where % (len(items) + 1), junk)
    with pytest.raises(CodecError):
        ieee488.parse_number_list(",".join(items))


def test_channel_lists() -> None:
    # SCPI-1999 Vol 1 §8.3.2 channel lists: "(@1!3)", ranges "1!1:1!4", lists "1!1,2!1".
    assert ieee488.parse_channel("1!3") == (1, 3)
    assert ieee488.format_channel_list([(1, 1), (2, 1)]) == "(@1!1,2!1)"
    assert ieee488.format_channel_ranges(2, 4) == "(@1!1:1!4,2!1:2!4)"
    for bad in ("3", "1!", "a!b", "1!2!3"):
        with pytest.raises(CodecError):
            ieee488.parse_channel(bad)


@pytest.mark.parametrize("fmt", ["REAL,32", "REAL,64"])
@pytest.mark.parametrize("order", ["big", "little"])
def test_complex_payload_in_every_format_and_byte_order(fmt: str, order: str) -> None:
    # SCPI-1999 Vol 2 FORMat:DATA REAL,32|64 with FORMat:BORDer NORMal (big) or SWAPped.
    pairs = np.array([1.5, -2.0, 3e-3, 4.25, -0.5, 0.0])
    payload = ieee488.encode_real_payload(pairs, fmt, order)
    expected = np.array([1.5 - 2.0j, 3e-3 + 4.25j, -0.5 + 0j])
    decoded = ieee488.decode_complex_payload(payload, fmt, order)
    assert decoded.dtype == np.complex128
    np.testing.assert_allclose(decoded, expected, rtol=1e-7 if fmt == "REAL,32" else 0)
    np.testing.assert_array_equal(ieee488.interleaved_to_complex(ieee488.decode_real_payload(payload, fmt, order)),
                                  decoded)
    with pytest.raises(CodecError, match="pairs"):
        ieee488.decode_complex_payload(payload[:-4], fmt, order)
