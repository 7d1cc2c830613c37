"""What the profiled analyzer and switch share (drivers/instrument.py), over an in-memory
instrument: how long the waits after a reset may take, how a sweep's end is waited for.  Tests against the simulated bench
live in tests/drivers/."""

from __future__ import annotations

import time

import numpy as np
import pytest
from scripted import ScriptedTransport

from lineproof.drivers import ieee488
from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.drivers.profiles import parse_analyzer_profile
from lineproof.drivers.session import MessageSession
from lineproof.errors import InputError, LinkError, ReplyError
from lineproof.values import SweepPlan

PROFILE = """
[profile]
name = "slow-reset"
kind = "analyzer"
based_on = "generic-scpi-reflectometer"
[timing]
command_timeout_s = 0.5
[operations]
{operations}
"""


class _DeadlineTransport(ScriptedTransport):
    """Records, for every line read, how many seconds were left until its deadline."""

    def __init__(self) -> None:
        super().__init__(lambda cmd: b"1\n" if cmd.startswith(b"*OPC?") else None)
        self.time_left: list[float] = []

    def read_line_raw(self, terminators: tuple[bytes, ...], deadline: float, limit: int) -> bytes:
        self.time_left.append(deadline - time.monotonic())
        return super().read_line_raw(terminators, deadline, limit)


def _reset_wait_time_left(operations: str) -> float:
    profile = parse_analyzer_profile(PROFILE.format(operations=operations), "slow-reset.toml")
    transport = _DeadlineTransport()
    analyzer = ProfiledAnalyzer(MessageSession(transport, default_timeout_s=0.5), profile)
    analyzer.reset()
    assert transport.written == [b"*RST\n", b"*CLS\n", b"*OPC?\n"]
    (left,) = transport.time_left
    return left


@pytest.mark.parametrize(
    ("operations", "allowed"),
    [
        # DEVELOPERS.md worked example 1: *RST takes up to 20 s, and only *OPC? shows it.
        ('reset = { send = "*RST", timeout_s = 20 }', 20.0),
        ('clear = { send = "*CLS", timeout_s = 8 }\nreset = { send = "*RST", timeout_s = 3 }', 8.0),
        ('wait = { send = "*OPC?", reply = "complete", timeout_s = 12 }', 12.0),
        ("", 0.5),  # nothing stated: the command timeout
    ],
)
def test_the_wait_after_a_reset_is_allowed_the_resets_own_timeout(operations: str, allowed: float) -> None:
    left = _reset_wait_time_left(operations)
    # The deadline was set a moment before the read: within a second of what was allowed.
    assert allowed - 1.0 < left <= allowed


class _ScpiReflectometer:
    """Just enough of an SCPI reflectometer for the generic profile: it sweeps the grid it
    was given (every trace value 0.5 - 0.25j) and answers each command of ``answers`` with the
    next of its scripted replies."""

    def __init__(self, **answers: list[str]) -> None:
        self.answers = {command.replace("_", " "): list(replies) for command, replies in answers.items()}
        self.start, self.stop, self.points = 1e6, 2e6, 11

    def __call__(self, cmd: bytes) -> bytes | None:
        text = cmd.decode().strip()
        if self.answers.get(text):
            return self.answers[text].pop(0).encode() + b"\n"
        # The replies of one program message form one response (IEEE 488.2 §8.4.1).
        replies = [reply for part in text.split(";") if (reply := self._one(part)) is not None]
        return b";".join(replies) + b"\n" if replies else None

    def _one(self, text: str) -> bytes | None:
        header, _, value = text.partition(" ")
        if header == "SENSe:FREQuency:STARt":
            self.start = float(value)
        elif header == "SENSe:FREQuency:STOP":
            self.stop = float(value)
        elif header == "SENSe:SWEep:POINts":
            self.points = int(value)
        replies = {"*IDN?": "Tarnmoor Instruments,SIM-R1,1,1.0", "*OPC?": "1", "*ESR?": "0",
                   "SYSTem:ERRor:NEXT?": '0,"No error"'}
        if text in replies:
            return replies[text].encode()
        if text == "TRACe:DATA? RAW":
            trace = np.full(self.points, 0.5 - 0.25j)
            return ieee488.encode_definite_block(trace.astype("<c16").tobytes())
        if text == "SENSe:FREQuency:DATA?":
            grid = np.linspace(self.start, self.stop, self.points)
            return ieee488.encode_definite_block(grid.astype("<f8").tobytes())
        return None


def _analyzer(instrument: _ScpiReflectometer, operations: str = "") -> tuple[ProfiledAnalyzer, ScriptedTransport]:
    profile = parse_analyzer_profile(PROFILE.format(operations=operations), "variant.toml")
    transport = ScriptedTransport(instrument)
    return ProfiledAnalyzer(MessageSession(transport, default_timeout_s=0.5), profile), transport


PLAN = SweepPlan(1e6, 2e6, 11)


def test_a_trigger_that_answers_when_done_must_answer_1() -> None:
    # INITiate;*OPC? (IEEE 488.2 §12.5.3): the reply "1" is the end of the sweep.
    trigger = 'trigger = { send = "INITiate:IMMediate;*OPC?", reply = "complete" }'
    analyzer, transport = _analyzer(_ScpiReflectometer(), trigger)
    analyzer.configure(PLAN)
    assert analyzer.measure(["S11"])["S11"].size == 11
    assert b"*OPC?\n" not in transport.written  # the trigger's own reply was the wait
    analyzer, _ = _analyzer(_ScpiReflectometer(**{"INITiate:IMMediate;*OPC?": ["0"]}), trigger)
    analyzer.configure(PLAN)
    with pytest.raises(ReplyError, match="must answer 1") as caught:
        analyzer.measure(["S11"])
    assert caught.value.command == "INITiate:IMMediate;*OPC?" and caught.value.expected == "1"


POLLED = 'wait = { send = "*ESR?", reply = "status", arm = "*OPC", done_bits = 1 }'


def test_a_polled_wait_reads_the_status_until_the_operation_complete_bit() -> None:
    # IEEE 488.2 §12.5.2: *OPC sets bit 0 of the event status register when the sweep ends.
    instrument = _ScpiReflectometer(**{"*ESR?": ["0", "0", "0", "1"]})  # configure's read, then the polls
    analyzer, transport = _analyzer(instrument, POLLED)
    analyzer.configure(PLAN)
    start = len(transport.written)
    assert analyzer.measure(["S11"])["S11"].size == 11
    sweep = [w.decode().strip() for w in transport.written[start:start + 6]]
    assert sweep == ["INITiate:IMMediate", "*OPC", "*ESR?", "*ESR?", "*ESR?", 'SENSe:FUNCtion "XFRequency:S11"']


def test_a_reset_seen_by_a_polled_wait_is_not_lost() -> None:
    # The poll's *ESR? read clears the Power On bit (128): the driver must still tell.
    instrument = _ScpiReflectometer(**{"*ESR?": ["0", "129"]})
    analyzer, _ = _analyzer(instrument, POLLED)
    analyzer.configure(PLAN)
    with pytest.raises(ReplyError, match="Power On bit"):
        analyzer.measure(["S11"])
    with pytest.raises(InputError, match="configure"):
        analyzer.measure(["S11"])


def test_a_polled_wait_that_never_completes_ends_at_its_timeout() -> None:
    analyzer, _ = _analyzer(_ScpiReflectometer(), POLLED)
    analyzer.configure(PLAN)
    started = time.monotonic()
    with pytest.raises(LinkError, match="never any of bits 0x1") as caught:
        analyzer.measure(["S11"])
    assert time.monotonic() - started < 3.0  # the sweep timeout: 3 x 11 ms + 0.5 s
    assert caught.value.command == "*ESR?" and "waiting for a sweep" in str(caught.value)


def test_a_polled_status_that_is_not_a_number_is_a_reply_error() -> None:
    analyzer, _ = _analyzer(_ScpiReflectometer(**{"*ESR?": ["0", "busy"]}), POLLED)
    analyzer.configure(PLAN)
    with pytest.raises(ReplyError, match="whole number") as caught:
        analyzer.measure(["S11"])
    assert caught.value.command == "*ESR?"
