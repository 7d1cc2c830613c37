"""``lineproof sim SCENARIO`` as a user runs it: a subprocess that prints where its
instruments are, serves them through real sockets and pseudo-terminals, and stops cleanly on
Ctrl-C (SIGINT) or SIGTERM."""

from __future__ import annotations

import os
import queue
import re
import signal
import subprocess
import sys
import threading
from collections.abc import Iterator
from contextlib import closing, contextmanager

import pytest
import pyvisa
import serial

from lineproof.simulators.control import BenchControlClient

pytestmark = pytest.mark.skipif(os.name != "posix", reason="pseudo-terminals and signals as on POSIX")


@contextmanager
def running_sim(scenario: str) -> Iterator[tuple[subprocess.Popen[str], dict[str, str]]]:
    """Start ``lineproof sim`` and wait (bounded) until it says it is serving."""
    process = subprocess.Popen([sys.executable, "-m", "lineproof.cli", "sim", scenario], stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, text=True)
    lines: queue.Queue[str] = queue.Queue()
    reader = threading.Thread(target=lambda: [lines.put(line) for line in process.stdout], daemon=True)
    reader.start()
    seen: dict[str, str] = {"output": ""}
    try:
        while "serving" not in seen["output"]:
            line = lines.get(timeout=30)
            seen["output"] += line
            for key, pattern in (("analyzer", r"^analyzer\s+VISA resource (\S+)"),
                                 ("serial", r"^analyzer\s+serial port (\S+)"),
                                 ("switch", r"^switch\s+VISA resource (\S+)"),
                                 ("control", r"^control\s+(127\.0\.0\.1:\d+)")):
                found = re.match(pattern, line)
                if found:
                    seen[key] = found.group(1)
        yield process, seen
    finally:
        if process.poll() is None:
            process.kill()
        process.wait(timeout=10)
        reader.join(timeout=5)
        seen["output"] += "".join(iter_queue(lines))
        process.stdout.close()
        process.stderr.close()


def iter_queue(lines: queue.Queue[str]) -> Iterator[str]:
    while not lines.empty():
        yield lines.get_nowait()


def test_sim_serves_a_switched_bench_and_stops_on_ctrl_c() -> None:
    with running_sim("demo-switch") as (process, seen):
        manager = pyvisa.ResourceManager("@py")
        try:
            for key, maker_model in (("analyzer", "SIM-T2 analyzer"), ("switch", "SIM-X24 switch matrix")):
                with closing(manager.open_resource(seen[key], read_termination="\n", write_termination="\n",
                                                   timeout=5000)) as link:
                    assert maker_model in link.query("*IDN?")
        finally:
            manager.close()
        with BenchControlClient(seen["control"]) as control:
            assert len(control.request("devices")["devices"]) == 12
        process.send_signal(signal.SIGINT)
        assert process.wait(timeout=15) == 0
    assert seen["output"].rstrip().endswith("bench stopped")


def test_sim_serves_a_serial_analyzer_and_stops_on_sigterm() -> None:
    with running_sim("serial-bench") as (process, seen):
        with serial.Serial(seen["serial"], 115200, timeout=3) as port:
            port.write(b"hello\r")
            reply = b""
            while not reply.endswith(b"\r\nS2> "):  # the prompt of the open may come first
                chunk = port.read(1)
                assert chunk, f"no prompt after {reply!r}"
                reply += chunk
            assert b"hello\r\nTarnmoor Instruments,SIM-S2 serial analyzer" in reply
        process.send_signal(signal.SIGTERM)
        assert process.wait(timeout=15) == 0
    assert "bench stopped" in seen["output"]


def test_sim_lists_shipped_scenarios() -> None:
    done = subprocess.run([sys.executable, "-m", "lineproof.cli", "sim", "--list"], capture_output=True, text=True,
                          timeout=60)
    assert done.returncode == 0
    for name in ("demo-bench", "demo-switch", "serial-bench"):
        assert name in done.stdout


def test_sim_refuses_an_unknown_scenario_with_a_clear_error() -> None:
    done = subprocess.run([sys.executable, "-m", "lineproof.cli", "sim", "no-such-bench"], capture_output=True,
                          text=True, timeout=60)
    assert done.returncode == 3  # invalid input (harness/cli.py)
    assert "no scenario file or shipped scenario named 'no-such-bench'" in done.stderr
    assert "demo-switch" in done.stderr  # the fix names what exists
