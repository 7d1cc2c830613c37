"""``lineproof instruments``: listing and identifying instruments over the real transports,
each answer within a bounded time."""

from __future__ import annotations

import json
import socket
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager

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


@contextmanager
def _silent_server() -> Iterator[tuple[str, list[socket.socket]]]:
    """A TCP server on 127.0.0.1 that accepts every connection and never sends a byte."""
    listener = socket.create_server(("127.0.0.1", 0))
    listener.settimeout(0.05)
    accepted: list[socket.socket] = []
    stop = threading.Event()

    def serve() -> None:
        while not stop.is_set():
            try:
                accepted.append(listener.accept()[0])
            except TimeoutError:
                continue

    thread = threading.Thread(target=serve, name="silent-server", daemon=True)
    thread.start()
    try:
        yield f"TCPIP::127.0.0.1::{listener.getsockname()[1]}::SOCKET", accepted
    finally:
        stop.set()
        thread.join()
        for connection in accepted:
            connection.close()
        listener.close()


def test_a_resource_that_connects_and_never_answers_costs_about_the_timeout(
        capsys: pytest.CaptureFixture[str]) -> None:
    # Nothing may wait for longer than --timeout: not the *IDN?, not a question to the error
    # queue after it (the generic profile's command timeout is 5 s).
    with _silent_server() as (resource, accepted):
        started = time.monotonic()
        report = _run(capsys, "--identify", "--no-search", "--resource", resource, "--timeout", "0.5")
        elapsed = time.monotonic() - started
        assert accepted  # it did take the connection
    (item,) = report["found"]
    assert item["identity"] is None and "timed out" in item["problem"]
    assert elapsed < 3.0


def test_listing_names_what_was_not_searched(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["instruments"]) == 0
    out = capsys.readouterr().out
    assert "VISA resources:" in out and "serial ports (pyserial):" in out and "--identify" in out
    # pyvisa-py's sentence on each missing package comes with the command that installs it
    asked = [line for line in out.splitlines() if "Please install" in line]
    assert all("pip install" in line for line in asked)
