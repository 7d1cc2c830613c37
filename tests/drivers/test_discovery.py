"""``lineproof instruments``: listing and identifying instruments over the real transports,
each answer within a bounded time."""

from __future__ import annotations

import json
import socket

import pytest
from links import DriverBench

from lineproof.cli import main


def _run(capsys: pytest.CaptureFixture[str], *arguments: str) -> dict:
    assert main(["instruments", *arguments, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_a_given_resource_is_identified(link: DriverBench, capsys: pytest.CaptureFixture[str]) -> None:
    report = _run(capsys, "--identify", "--no-search", "--resource", link.resource, "--timeout", "2")
    (item,) = report["found"]
    assert item["resource"] == link.resource and item["transport"] == link.kind.transport
    # IEEE 488.2 §10.14 (from memory) fields of ideal-bench.toml's identity line
    assert item["identity"]["manufacturer"] == "Tarnmoor Instruments" and item["identity"]["serial"] == "SIM0099"


def test_a_silent_or_absent_instrument_is_reported_not_waited_for(link: DriverBench,
                                                                   capsys: pytest.CaptureFixture[str]) -> None:
    link.arm("stall", seconds=3, match=link.analyzer().profile.operation("identify").send)
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        absent = f"TCPIP::127.0.0.1::{probe.getsockname()[1]}::SOCKET"
    report = _run(capsys, "--identify", "--no-search", "--resource", link.resource, "--resource", absent,
                  "--timeout", "0.5")
    silent, refused = report["found"]
    assert silent["identity"] is None and "timed out" in silent["problem"]
    assert refused["identity"] is None and "Connection refused" in refused["problem"]


def test_listing_names_what_was_not_searched(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["instruments"]) == 0
    out = capsys.readouterr().out
    assert "VISA resources:" in out and "serial ports (pyserial):" in out and "--identify" in out
