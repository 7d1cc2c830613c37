"""The simulators' own SCPI parser (serving side) follows SCPI-1999 Vol 1 syntax rules."""

from __future__ import annotations

from lineproof.simulators.scpi import ScpiDispatcher, parse_number


def dispatcher() -> tuple[ScpiDispatcher, dict[str, str]]:
    seen: dict[str, str] = {}
    d = ScpiDispatcher()
    d.add("[SENSe]:FREQuency:STARt", lambda a, s: seen.__setitem__("start", a))
    d.add("[SENSe]:FREQuency:STOP", lambda a, s: seen.__setitem__("stop", a))
    d.add("[SENSe]:FREQuency:STARt?", lambda a, s: seen.get("start", "0"))
    d.add("CALCulate:PARameter:SELect", lambda a, s: seen.__setitem__("calc", f"{s[0]}:{a}"))
    d.add("*IDN?", lambda a, s: "X,Y,Z,1")
    return d, seen


def test_short_long_and_optional_nodes() -> None:
    d, seen = dispatcher()
    d.execute("SENS:FREQ:STAR 1e6")
    assert seen["start"] == "1e6"
    d.execute(":frequency:start 2e6")
    assert seen["start"] == "2e6"
    assert d.execute("FREQ:STAR?") == ["2e6"]


def test_compound_message_keeps_the_path() -> None:
    # SCPI-1999 Vol 1 §6.2.4: after ';' a header is relative to the last node; ':' resets.
    d, seen = dispatcher()
    assert d.execute("SENS:FREQ:STAR 1;STOP 2;*IDN?;:FREQ:STAR?") == ["X,Y,Z,1", "1"]
    assert seen["stop"] == "2"


def test_numeric_suffix_is_passed_on() -> None:
    d, seen = dispatcher()
    d.execute("CALC2:PAR:SEL 'x'")
    assert seen["calc"] == "2:'x'"


def test_unknown_header_goes_to_error_queue() -> None:
    d, _ = dispatcher()
    assert d.execute("FREQ:CENT 1") == []
    assert d.pop_error() == '-113,"Undefined header"'
    assert d.pop_error() == '0,"No error"'


def test_queue_overflow() -> None:
    d, _ = dispatcher()
    for _ in range(40):
        d.execute("NOPE")
    entries = [d.pop_error() for _ in range(ScpiDispatcher.QUEUE_DEPTH)]
    assert entries[-1] == '-350,"Queue overflow"'
    assert d.pop_error() == '0,"No error"'


def test_numbers_with_suffixes() -> None:
    assert parse_number("144 MHz") == 144e6
    assert parse_number("1.5GHZ") == 1.5e9
    assert parse_number("-3") == -3
