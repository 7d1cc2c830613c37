"""What the profiled analyzer and switch share (drivers/instrument.py), over an in-memory
instrument: how long the waits after a reset may take.  Tests against the simulated bench
live in tests/drivers/."""

from __future__ import annotations

import time

import pytest
from scripted import ScriptedTransport

from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.drivers.profiles import parse_analyzer_profile
from lineproof.drivers.session import MessageSession

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
