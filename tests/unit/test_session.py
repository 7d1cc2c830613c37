"""MessageSession over an in-memory instrument: blocks with exact-length checks and a cap,
error-queue draining that names the command, retries only of idempotent queries, prompted
line framing (echo, prompt, error lines, number rows), size-limited tracing.

Framing rules checked here are IEEE 488.2 §8.7.9/§8.7.10 (blocks), §8.5 (response message
terminator after a block), SCPI-1999 Vol 2 §21.8 (error queue), and PROTOCOLS.md §2.  The
clause numbers of IEEE 488.2 and SCPI-1999 in this module are cited from memory.
"""

from __future__ import annotations

import logging
import re

import numpy as np
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st
from scripted import ScriptedTransport

from lineproof.drivers import ieee488
from lineproof.drivers.session import TRACE_LIMIT, Framing, MessageSession
from lineproof.errors import InstrumentReported, LinkError, ReplyError


def _session(answer, framing: Framing | None = None, **kwargs) -> tuple[MessageSession, ScriptedTransport]:
    transport = ScriptedTransport(answer)
    return MessageSession(transport, framing, default_timeout_s=1.0, **kwargs), transport


def _block(payload: bytes) -> bytes:
    return ieee488.encode_definite_block(payload) + b"\n"


def test_definite_block_is_read_exactly() -> None:
    payload = bytes(range(256)) * 3  # contains 0x0A bytes: a line read would stop early
    session, _ = _session(lambda cmd: _block(payload))
    assert session.query_block("TRAC? RAW") == payload


def test_leading_white_space_before_a_block() -> None:
    session, _ = _session(lambda cmd: b" \r#15hello\n")
    assert session.query_block("A?") == b"hello"


def test_an_indefinite_block_is_refused_and_its_rest_never_read_as_the_next_reply() -> None:
    # IEEE 488.2 §8.7.10: '#0' runs to NL^END; a byte stream has no END, and this REAL,64
    # payload holds a 0x0A byte (the first NL would have cut it short).
    payload = np.array([1.0 + 10 * 2.0 ** -52, 3.0]).astype("<f8").tobytes()  # 0a 00 .. f0 3f
    assert b"\n" in payload[:-1]
    session, transport = _session(lambda cmd: b"#0" + payload + b"\n" if cmd == b"TRAC? RAW\n" else b"1\n")
    with pytest.raises(ReplyError) as caught:
        session.query_block("TRAC? RAW")
    error = caught.value
    assert error.command == "TRAC? RAW" and error.resource == transport.resource
    assert "indefinite-length block" in str(error) and "fix: set the instrument to definite-length blocks" in str(error)
    assert session.query("*OPC?") == "1"  # not the rest of the block
    assert transport.reopened == 1


def test_declared_size_above_the_cap_is_refused_before_reading() -> None:
    session, transport = _session(lambda cmd: b"#9999999999", block_cap=1 << 20)
    with pytest.raises(ReplyError, match="cap") as caught:
        session.query_block("TRAC? RAW")
    assert caught.value.resource == transport.resource and caught.value.command == "TRAC? RAW"


def test_block_longer_than_its_header_is_an_error() -> None:
    session, _ = _session(lambda cmd: b"#14abcdef\n")
    with pytest.raises(ReplyError, match="longer than its header"):
        session.query_block("TRAC? RAW")


def test_truncated_block_is_an_error_naming_resource_command_and_expectation() -> None:
    session, transport = _session(lambda cmd: _block(b"x" * 100)[:60], retries=0)
    with pytest.raises(LinkError) as caught:
        session.query_block("TRAC? RAW")
    text = str(caught.value)
    assert transport.resource in text and "'TRAC? RAW'" in text and "arbitrary block" in text
    # The rest of a broken response must never be read as the next reply: the link is
    # renewed before the next command.
    assert transport.reopened == 0
    with pytest.raises(LinkError):
        session.query_block("TRAC? RAW")
    assert transport.reopened == 1


@settings(max_examples=200, deadline=None)
@given(payload=st.binary(max_size=3000), cut=st.integers(min_value=0, max_value=3020))
def test_a_truncated_block_never_yields_data(payload: bytes, cut: int) -> None:
    wire = _block(payload)
    session, _ = _session(lambda cmd: wire[:cut], retries=0)
    if cut >= len(wire):
        assert session.query_block("D?") == payload
        return
    with pytest.raises((LinkError, ReplyError)):
        session.query_block("D?")


@settings(max_examples=300, deadline=None)
@given(garbage=st.binary(min_size=1, max_size=64))
@example(garbage=b"#0\x01\x02\n\x03\n")  # indefinite: the first NL would cut it
def test_garbage_is_an_error_or_exactly_the_block_it_declares(garbage: bytes) -> None:
    session, _ = _session(lambda cmd: garbage, retries=0, block_cap=1 << 16)
    try:
        payload = session.query_block("D?")
    except (LinkError, ReplyError):
        return
    # Only bytes that form a valid definite-length block come through (an indefinite one,
    # '#0', cannot be told apart from a cut one), and then exactly its payload.
    header = ieee488.parse_block_header(garbage, 1 << 16)
    assert header is not None and header.payload_length is not None
    end = header.header_length + header.payload_length
    assert garbage[header.header_length:end] == payload and garbage[end:end + 1] == b"\n"


@settings(max_examples=50, deadline=None)
@given(length=st.integers(min_value=1001, max_value=10**9 - 1))
def test_any_declared_length_above_the_cap_is_refused(length: int) -> None:
    cap = 1000  # a definite length has at most nine digits (IEEE 488.2 §8.7.9)
    header = f"#{len(str(length))}{length}".encode()
    session, _ = _session(lambda cmd: header + b"x" * 10, retries=0, block_cap=cap)
    with pytest.raises(ReplyError, match="cap"):
        session.query_block("D?")


def _queue(entries: list[str]):
    def answer(cmd: bytes) -> bytes | None:
        if cmd.startswith(b"SYST:ERR?"):
            return (entries.pop(0) if entries else '0,"No error"').encode() + b"\n"
        return None
    return answer


def test_drain_errors_names_the_command_and_the_instruments_message() -> None:
    session, _ = _session(_queue(['-222,"Data out of range"', '-113,"Undefined header"']))
    session.send("SENS:SWE:POIN 99999")
    with pytest.raises(InstrumentReported) as caught:
        session.drain_errors("SYST:ERR?")
    error = caught.value
    assert error.code == -222 and "Data out of range" in str(error) and "+1 more" in str(error)
    assert error.command == "SENS:SWE:POIN 99999"
    session.drain_errors("SYST:ERR?")  # the queue is empty now: no error


def test_drain_errors_names_every_suspect_when_several_commands_ran() -> None:
    session, _ = _session(_queue(['-221,"Settings conflict"']))
    session.send("INIT")
    session.send("FORM REAL,64")
    with pytest.raises(InstrumentReported, match=re.escape("one of: INIT; FORM REAL,64")):
        session.drain_errors("SYST:ERR?")


def test_an_unanswered_query_is_explained_by_the_error_queue() -> None:
    # IEEE 488.2 §6.5.7: an instrument does not answer a query it could not execute.
    queue = ['-230,"Data corrupt or stale"']
    session, _ = _session(_queue(queue), error_query="SYST:ERR?")
    with pytest.raises(InstrumentReported) as caught:
        session.query_block("TRAC? RAW")
    assert caught.value.code == -230 and caught.value.command == "TRAC? RAW"


class _DropsFirst:
    """Answers ``*IDN?`` only from the second time on (the first reply is lost)."""

    def __init__(self) -> None:
        self.calls = 0

    def __call__(self, cmd: bytes) -> bytes | None:
        if cmd.startswith(b"*IDN?"):
            self.calls += 1
            return b"Tarnmoor Instruments,SIM-R1,1,1.0\n" if self.calls > 1 else None
        return None


def test_an_idempotent_query_is_repeated_on_a_fresh_link_and_recorded() -> None:
    session, transport = _session(_DropsFirst(), retries=2)
    assert session.query("*IDN?").startswith("Tarnmoor")
    assert transport.reopened == 1
    assert len(session.recoveries) == 1 and "attempt 2 of 3" in session.recoveries[0]


def test_a_non_idempotent_query_is_never_repeated() -> None:
    session, transport = _session(_DropsFirst(), retries=2)
    with pytest.raises(LinkError, match="not repeated: it is not idempotent"):
        session.query("*IDN?", idempotent=False)
    assert sum(w.startswith(b"*IDN?") for w in transport.written) == 1


def test_retries_are_bounded() -> None:
    session, transport = _session(lambda cmd: None, retries=2)
    with pytest.raises(LinkError, match="gave up after 3 attempts"):
        session.query("*IDN?")
    assert sum(w.startswith(b"*IDN?") for w in transport.written) == 3


# -- prompted line framing (PROTOCOLS.md §2) ------------------------------------------------

PROMPTED = Framing(write_termination=b"\r", read_termination=b"\r\n", echo=True, prompt=b"S2> ",
                   error_line=re.compile(r"^\?(?P<code>\d+) (?P<text>.*)$"))


def _terminal(replies: dict[str, list[str]]):
    """Echo each command with CR LF, then its reply lines with CR LF, then the prompt."""
    def answer(cmd: bytes) -> bytes:
        text = cmd.decode().rstrip("\r")
        lines = replies.get(text, ["?10 unknown command"])
        return cmd + b"\n" + "".join(f"{line}\r\n" for line in lines).encode() + b"S2> "
    return answer


def test_prompted_query_reads_echo_reply_and_prompt() -> None:
    session, transport = _session(_terminal({"hello": ["Tarnmoor,SIM-S2,7,1.0"], "ifbw 1000": []}), PROMPTED)
    transport.inbox += b"S2> "  # the prompt the instrument sent when the port opened
    assert session.query("hello") == "Tarnmoor,SIM-S2,7,1.0"
    session.send("ifbw 1000")
    assert transport.written == [b"hello\r", b"ifbw 1000\r"] and not transport.inbox


def test_prompted_error_line_is_raised_with_code_text_and_command() -> None:
    session, transport = _session(_terminal({"band 1 2 999": ["?21 points out of range 2..201"]}), PROMPTED)
    with pytest.raises(InstrumentReported) as caught:
        session.send("band 1 2 999")
    assert (caught.value.code, caught.value.text, caught.value.command) == (21, "points out of range 2..201",
                                                                             "band 1 2 999")
    assert not transport.inbox  # in step for the next command


def test_prompted_rows_with_checked_count() -> None:
    rows = ["1e6 0.5 -0.25", "2e6 0.4 -0.2", "end 2"]
    session, _ = _session(_terminal({"rows raw s11": rows, "rows bad": rows[:2] + ["end 3"]}), PROMPTED)
    np.testing.assert_array_equal(session.query_rows("rows raw s11", 3), [[1e6, 0.5, -0.25], [2e6, 0.4, -0.2]])
    with pytest.raises(ReplyError, match="announces 3 rows, 2 came"):
        session.query_rows("rows bad", 3)


def test_prompted_echo_must_match() -> None:
    def answer(cmd: bytes) -> bytes:
        return b"hellp\r\nTarnmoor,SIM-S2,7,1.0\r\nS2> "
    session, _ = _session(answer, PROMPTED)
    with pytest.raises(ReplyError, match="echoed 'hellp'"):
        session.query("hello")


def test_prompted_session_resynchronises_on_the_prompt_after_a_timeout() -> None:
    reply = b"Tarnmoor,SIM-S2,7,1.0\r\nS2> "
    calls = {"n": 0}

    def answer(cmd: bytes) -> bytes:
        calls["n"] += 1
        return cmd + b"\n" + (reply if calls["n"] > 1 else b"")  # the first reply is late
    session, transport = _session(answer, PROMPTED, retries=0)
    with pytest.raises(LinkError, match="not repeated"):
        session.query("hello", idempotent=False)
    transport.inbox += reply  # ... and arrives after the timeout
    assert session.query("hello") == "Tarnmoor,SIM-S2,7,1.0"
    assert transport.reopened == 0 and not transport.inbox  # the late reply ended at a prompt


def test_tracing_is_size_limited(caplog: pytest.LogCaptureFixture) -> None:
    long_reply = ",".join(["1.0"] * 5000)
    session, _ = _session(lambda cmd: long_reply.encode() + b"\n")
    with caplog.at_level(logging.DEBUG, logger="lineproof.io"):
        assert session.query_numbers("TRAC? RAW").size == 5000
    lines = [r.getMessage() for r in caplog.records]
    assert any("TRAC? RAW" in line for line in lines)
    assert all(len(line) < TRACE_LIMIT + 120 for line in lines)
    assert any(f"({len(long_reply)} chars)" in line for line in lines)


class _LosesWritesOnce:
    """A link that loses everything written after ``FREQ`` settings until the next reopen,
    the way a TCP connection the peer has closed swallows writes; then answers normally."""

    def __init__(self, transport_holder: list) -> None:
        self.holder = transport_holder
        self.dead = False
        self.log: list[bytes] = []

    def __call__(self, cmd: bytes) -> bytes | None:
        transport = self.holder[0]
        if transport.reopened and self.dead:
            self.dead = False
        if cmd.startswith(b"FREQ") and not transport.reopened:
            self.dead = True
        if self.dead:
            return None
        self.log.append(cmd)
        if cmd.startswith(b"*OPC?") or cmd.startswith(b"TRAC?"):
            return b"1\n"
        return None


def _losing(retries: int) -> tuple[MessageSession, _LosesWritesOnce]:
    holder: list = []
    instrument = _LosesWritesOnce(holder)
    session, transport = _session(instrument, retries=retries)
    holder.append(transport)
    return session, instrument


def test_settings_written_to_a_lost_link_are_sent_again_before_the_retry() -> None:
    session, instrument = _losing(retries=1)
    session.send("FREQ:STAR 1e8", idempotent=True)
    session.send("FREQ:STOP 2e8", idempotent=True)
    assert session.query("TRAC?") == "1"
    # On the fresh link the instrument got both settings again, in order, before the query.
    assert instrument.log == [b"FREQ:STAR 1e8\n", b"FREQ:STOP 2e8\n", b"TRAC?\n"]
    assert any("re-sent 2 setting(s)" in note for note in session.recoveries)


def test_a_trigger_written_to_a_lost_link_stops_the_run() -> None:
    # INIT then *OPC?: if the link died under INIT, a repeated *OPC? on a fresh link would
    # say "complete" for a sweep that never ran, and the next read would return old data.
    session, instrument = _losing(retries=2)
    session.send("FREQ:STAR 1e8", idempotent=True)
    session.send("INIT")
    with pytest.raises(LinkError, match="after 'INIT' was sent without a reply: it may not have arrived") as caught:
        session.wait_complete("*OPC?")
    assert caught.value.command == "INIT"
    assert b"INIT\n" not in instrument.log and b"*OPC?\n" not in instrument.log
    assert session.query("*OPC?") == "1"  # the next operation starts clean
