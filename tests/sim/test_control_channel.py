"""The bench control channel refuses malformed input with a clear error and keeps the
connection open (PROTOCOLS.md §3)."""

from __future__ import annotations

import json
import socket
from collections.abc import Iterator

import pytest

from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchController


class RawControl:
    """JSON lines written byte for byte, to send what a well-behaved client never would."""

    def __init__(self, address: str) -> None:
        host, _, port = address.rpartition(":")
        self.socket = socket.create_connection((host, int(port)), timeout=5)
        self.reader = self.socket.makefile("rb")

    def send(self, line: bytes) -> dict:
        self.socket.sendall(line + b"\n")
        return json.loads(self.reader.readline())

    def close(self) -> None:
        self.reader.close()
        self.socket.close()


@pytest.fixture
def raw(start_bench) -> Iterator[RawControl]:
    bench: SimulatedBench = start_bench("two-port-bench")
    client = RawControl(bench.control_address)
    yield client
    client.close()


@pytest.mark.parametrize("line, message", [
    (b'{"op": "status"', "not JSON"),
    (b"\xff\xfe{}", "not UTF-8"),
    (b"[1, 2]", 'a request is a JSON object with an "op" string'),
    (b'{"port": 1}', 'a request is a JSON object with an "op" string'),
    (b'{"op": "teleport"}', "unknown op 'teleport'; use one of"),
    (b'{"op": "connect", "prot": 1, "object": "short"}', "connect: unknown field 'prot'; its fields are"),
    (b'{"op": "connect", "port": 3, "object": "short"}', "port must be an integer 1..2, got 3"),
    (b'{"op": "connect", "port": "1", "object": "short"}', "port must be an integer 1..2, got '1'"),
    (b'{"op": "connect", "port": true, "object": "short"}', "port must be an integer 1..2, got True"),
    (b'{"op": "connect", "port": 1}', "connect needs an object name"),
    (b'{"op": "connect", "port": 1, "object": "shrot"}', "object: no object named 'shrot' on this bench"),
    (b'{"op": "connect", "port": 1, "object": "TL30-0001"}', "is a two-port: say what its output goes to"),
    (b'{"op": "connect", "port": 1, "object": "short", "output": "load"}', "is a one-port"),
    (b'{"op": "connect", "port": 1, "object": "thru", "output": "port:9"}', "output port must be an integer 1..2"),
    (b'{"op": "connect", "port": 1, "object": "thru", "output": "port:x"}', "write port:<number>"),
    (b'{"op": "connect", "port": 1, "object": "thru", "output": "port:1"}', "cannot go back to the port it is on"),
    (b'{"op": "connect", "port": 1, "object": "thru", "output": "TL30-0002"}', "not a one-port"),
    (b'{"op": "connect", "port": 1, "object": "thru", "output": "load", "reversed": "yes"}',
     "reversed must be true or false"),
    (b'{"op": "truth", "port": 1, "start_hz": 1e8}', "a grid needs all of start_hz, stop_hz and points"),
    (b'{"op": "truth", "port": 1, "start_hz": 2e8, "stop_hz": 1e8, "points": 3}', "0 < start_hz <= stop_hz"),
    (b'{"op": "truth", "port": 1, "start_hz": 1e8, "stop_hz": 2e8, "points": 2.5}', "points an integer"),
    (b'{"op": "truth_s"}', "truth_s needs either object"),
    (b'{"op": "error_terms", "direction": "sideways"}', "direction must be one of forward, reverse"),
    (b'{"op": "error_terms", "port": 1, "direction": "forward"}', "port or direction, not both"),
    (b'{"op": "error_terms", "at": "yesterday"}', 'at must be "now" or "last_sweep"'),
    (b'{"op": "set", "noise": "off"}', "noise must be true or false"),
    (b'{"op": "set", "temperature_c": 300}', "temperature_c must be a number from -40 to 85"),
    (b'{"op": "advance", "seconds": -5}', "seconds must be a number from 0 to 1e7"),
    (b'{"op": "status", "instrument": "analyzer7"}', "no analyzer named 'analyzer7'"),
    (b'{"op": "fault", "kind": "stall", "seconds": 0}', "seconds must be more than 0"),
    (b'{"op": "switch"}', "this bench has no switch matrix"),
    # JSON values of the wrong type where a name is looked up (unhashable: once a TypeError
    # that dropped the connection without a reply)
    (b'{"op": "status", "instrument": [1]}', "instrument must be a string (an analyzer's name), got [1]"),
    (b'{"op": "faults", "instrument": {}}', "instrument must be a string (an instrument's name), got {}"),
    (b'{"op": "clear_faults", "instrument": [1]}', "instrument must be a string"),
    (b'{"op": "error_terms", "direction": ["x"]}', 'direction must be a string (the driving direction), got ["x"]'),
    (b'{"op": "fault", "instrument": [1], "kind": "drop"}', "instrument must be a string (an instrument's name)"),
    (b"[" * 100000, "JSON nested too deeply"),
    (b'{"op": "status", "pad": ' + b"[" * 100000 + b"]" * 100000 + b"}", "JSON nested too deeply"),
    # Python's json reads these; RFC 8259 §6 has no such numbers, and a grid of them is NaN
    (b'{"op": "truth", "port": 1, "start_hz": 1e8, "stop_hz": Infinity, "points": 3}',
     "start_hz and stop_hz must be finite numbers of hertz"),
    (b'{"op": "truth", "port": 1, "start_hz": NaN, "stop_hz": 1e9, "points": 3}', "must be finite numbers"),
    (b'{"op": "error_terms", "port": 1, "start_hz": 1e8, "stop_hz": 1e400, "points": 3}', "must be finite numbers"),
])
def test_malformed_requests_get_a_clear_error_and_the_line_stays_open(raw: RawControl, line: bytes,
                                                                      message: str) -> None:
    reply = raw.send(line)
    assert reply["ok"] is False
    assert message in reply["error"]
    assert raw.send(b'{"op": "status"}')["ok"] is True  # the same connection still serves


def test_a_refused_connect_changes_nothing(raw: RawControl) -> None:
    assert raw.send(b'{"op": "connect", "port": 1, "object": "short"}')["ok"]
    before = raw.send(b'{"op": "truth", "port": 1}')
    raw.send(b'{"op": "connect", "port": 1, "object": "TL30-0001"}')
    assert raw.send(b'{"op": "truth", "port": 1}') == before


def test_an_overlong_line_is_refused_without_closing(raw: RawControl) -> None:
    reply = raw.send(b'{"op": "status", "pad": "' + b"x" * (1 << 20) + b'"}')
    assert reply["ok"] is False
    assert raw.send(b'{"op": "status"}')["ok"] is True


def test_an_unforeseen_failure_in_an_op_is_an_error_reply_not_a_dropped_link(
        start_bench, monkeypatch: pytest.MonkeyPatch) -> None:
    # The last line of defence: whatever TypeError, ValueError or RecursionError an op raises
    # that no field check foresaw comes back as an error reply naming the op.
    def fails(self: BenchController, request: dict) -> dict:
        raise TypeError("unhashable type: 'list'")

    monkeypatch.setattr(BenchController, "_op_devices", fails)
    client = RawControl(start_bench("two-port-bench").control_address)
    try:
        reply = client.send(b'{"op": "devices"}')
        assert reply["ok"] is False
        assert reply["error"].startswith("devices: the bench could not serve this request (TypeError: unhashable")
        assert "PROTOCOLS.md §3" in reply["error"]
        assert client.send(b'{"op": "status"}')["ok"] is True
    finally:
        client.close()
