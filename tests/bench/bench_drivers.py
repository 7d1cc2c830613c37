"""Driver benchmarks: print figures (ratios measured in one run), assert nothing on time.

    .venv/bin/python tests/bench/bench_drivers.py [--repeat N]

1. A 10,001-point complex sweep as REAL,64 over TCP loopback (160 kB): the driver's trace
   read (query, block, decode to complex) against a raw-socket read of the same bytes and
   against plain pyvisa ``query_binary_values``.  Goal: driver/raw throughput >= 0.5.
2. The same sweep as ASCII: time ratio ASCII / binary through the driver.
3. Harness-side overhead of one command round trip (``*OPC?``) as a fraction of the round
   trip: (driver - raw socket) / driver.
4. (when the simulated serial analyzer is available) a serial line at 115200 baud: transfer
   time / (bytes x 10 / baud).  Goal <= 1.05.
"""

from __future__ import annotations

import argparse
import contextlib
import dataclasses
import multiprocessing
import socket
import statistics
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pyvisa
import serial

from lineproof.drivers import ieee488, open_analyzer
from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient
from lineproof.simulators.scenario import load_scenario
from lineproof.values import SweepPlan

SCENARIO = Path(__file__).parent.parent / "scenarios" / "ideal-bench.toml"
PLAN = SweepPlan(1e6, 3e9, 10001)
TRACE = "TRACe:DATA? RAW"


class Timings:
    """Times of several actions taken in turns: median and best of each."""

    def __init__(self, times: dict[str, list[float]]) -> None:
        self.median = {name: statistics.median(values) for name, values in times.items()}
        self.best = {name: min(values) for name, values in times.items()}

    def __getitem__(self, name: str) -> float:
        return self.median[name]


def time_actions(actions: dict[str, Callable[[], object]], repeat: int, rounds: int = 5) -> Timings:
    """Time each action ``repeat`` times per round, the actions taking turns round by round
    so that all of them see the same load on a shared machine (the ratios are what count)."""
    times: dict[str, list[float]] = {name: [] for name in actions}
    for _ in range(rounds):
        for name, action in actions.items():
            action()  # warm up after the other actions
            for _ in range(repeat):
                started = time.perf_counter()
                action()
                times[name].append(time.perf_counter() - started)
    return Timings(times)


def _serve(scenario_path: Path, serving: dict[str, Any], addresses: multiprocessing.connection.Connection,
           stop: multiprocessing.Event) -> None:
    scenario = load_scenario(scenario_path)
    scenario.analyzers[0] = dataclasses.replace(scenario.analyzers[0], **serving)
    with SimulatedBench(scenario) as bench:
        resource = bench.serial_port if serving.get("transport") == "serial" else bench.visa_resource
        addresses.send((resource, bench.control_address))
        stop.wait(600)


@contextlib.contextmanager
def bench_in_another_process(scenario: Path, **serving: Any) -> Iterator[tuple[str, str]]:
    """The simulated bench in a process of its own, as an instrument is: in this process its
    server threads would share the interpreter lock with the client being measured.
    ``serving`` changes how its analyzer is served (``transport="serial", baud_rate=...``)."""
    context = multiprocessing.get_context("spawn")
    receiver, sender = context.Pipe(duplex=False)
    stop = context.Event()
    process = context.Process(target=_serve, args=(scenario, serving, sender, stop), daemon=True)
    process.start()
    try:
        if not receiver.poll(30):
            raise RuntimeError("the simulated bench did not start")
        yield receiver.recv()
    finally:
        stop.set()
        process.join(10)


class RawSocketClient:
    """The floor: a plain TCP client that reads the header, then the payload straight into
    one buffer of the declared size."""

    def __init__(self, resource: str) -> None:
        _, host, port, _ = resource.split("::")
        self.sock = socket.create_connection((host, int(port)))
        self.sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)

    def _exact(self, count: int) -> bytearray:
        buffer = bytearray(count)
        view = memoryview(buffer)
        got = 0
        while got < count:
            got += self.sock.recv_into(view[got:], count - got)
        return buffer

    def query_block(self, command: bytes) -> bytes:
        self.sock.sendall(command + b"\n")
        head = self._exact(2)
        digits = int(head[1:2])
        length = int(self._exact(digits))
        return self._exact(length + 1)

    def query_line(self, command: bytes) -> bytes:
        self.sock.sendall(command + b"\n")
        data = b""
        while not data.endswith(b"\n"):
            data += self.sock.recv(4096)
        return data

    def close(self) -> None:
        self.sock.close()


def _decode(analyzer: ProfiledAnalyzer, payload: bytes | bytearray) -> np.ndarray:
    """The analyzer's own decoding of a trace block (REAL pairs viewed as complex)."""
    caps = analyzer.capabilities
    return ieee488.decode_complex_payload(payload, caps.data_format, caps.byte_order)


def bench_tcp(repeat: int) -> None:
    with bench_in_another_process(SCENARIO) as (resource, control_address), \
            BenchControlClient(control_address) as control:
        control.request("set", noise=False)
        control.connect(1, "TM150-0001", "good-termination")
        analyzer = open_analyzer(resource, "generic-scpi-reflectometer")
        raw = RawSocketClient(resource)
        manager = pyvisa.ResourceManager("@py")
        plain = manager.open_resource(resource, read_termination="\n", write_termination="\n")
        try:
            analyzer.configure(PLAN)
            reference = analyzer.measure(["S11"])["S11"]
            session = analyzer.session
            raw.sock.sendall(b"FORMat:DATA REAL,64;:FORMat:BORDer SWAPped\n")
            nbytes = len(raw.query_block(TRACE.encode()))

            def driver_read() -> np.ndarray:
                return _decode(analyzer, session.query_block(TRACE))

            def plain_read() -> np.ndarray:
                values = plain.query_binary_values(TRACE, datatype="d", is_big_endian=False, container=np.array)
                return values[0::2] + 1j * values[1::2]

            assert np.array_equal(driver_read(), reference) and np.array_equal(plain_read(), reference)
            block = time_actions({"raw": lambda: raw.query_block(TRACE.encode()), "driver": driver_read,
                                  "plain": plain_read}, repeat)
            t_measure = time_actions({"measure": lambda: analyzer.measure(["S11"])}, max(2, repeat // 5))["measure"]

            def ascii_read() -> np.ndarray:
                session.send("FORMat:DATA ASCii")
                values = session.query_numbers(TRACE)
                session.send("FORMat:DATA REAL,64")
                return values

            ascii_bytes = len(",".join(f"{v:.12g}" for v in ascii_read()))
            formats = time_actions({"ascii": ascii_read, "binary": driver_read}, max(2, repeat // 5))
            trip = time_actions({"raw": lambda: raw.query_line(b"*OPC?"),
                                 "driver": lambda: session.wait_complete("*OPC?")}, repeat * 5)

        finally:
            analyzer.close()
            raw.close()
            plain.close()
            manager.close()
    mb = nbytes / 1e6
    t_raw, t_driver, t_plain = block["raw"], block["driver"], block["plain"]
    print(f"1. {PLAN.points}-point complex sweep, REAL,64, {nbytes} bytes over TCP loopback, simulated "
          f"instrument in another process (median and best of 5 rounds of {repeat})")
    for label, name in (("raw socket", "raw"), ("driver (query, block, decode)", "driver"),
                        ("pyvisa query_binary_values", "plain")):
        print(f"   {label:<30}{block[name] * 1e3:8.3f} ms  {mb / block[name]:7.1f} MB/s"
              f"   best {block.best[name] * 1e3:.3f} ms")
    print(f"   driver / raw-socket throughput = {t_raw / t_driver:.2f} (medians), "
          f"{block.best['raw'] / block.best['driver']:.2f} (best)   goal >= 0.5")
    print(f"   plain query_binary_values / raw-socket throughput = {t_raw / t_plain:.3f}")
    print(f"   driver / plain query_binary_values throughput = {t_plain / t_driver:.1f}")
    print(f"   whole measure() (trigger, *OPC?, trace, grid check, error queue, *ESR?) {t_measure * 1e3:.2f} ms")
    print(f"2. the same sweep as ASCII (~{ascii_bytes} bytes, .12g on the wire): {formats['ascii'] * 1e3:.2f} ms "
          f"against {formats['binary'] * 1e3:.3f} ms; time ratio ASCII / binary = "
          f"{formats['ascii'] / formats['binary']:.0f}")
    overhead = (trip["driver"] - trip["raw"]) / trip["driver"]
    best = (trip.best["driver"] - trip.best["raw"]) / trip.best["driver"]
    print(f"3. one *OPC? round trip: raw socket {trip['raw'] * 1e6:.0f} us, driver {trip['driver'] * 1e6:.0f} us; "
          f"harness-side overhead = {overhead:.2f} of the round trip (best: {best:.2f})")


SERIAL_BAUD = 115200
SERIAL_PLAN = SweepPlan(100e6, 500e6, 201)


def _raw_serial_exchange(port: serial.Serial, command: bytes, end: bytes = b"\r\nS2> ") -> bytes:
    """The floor on a serial line: write a command, read until a line end and the prompt
    (a lone prompt may be the one sent when the port opened), nothing else."""
    port.write(command + b"\r")
    received = bytearray()
    while not received.endswith(end):
        received += port.read(max(1, port.in_waiting))
    return bytes(received)


def bench_serial(repeat: int) -> None:
    with bench_in_another_process(SCENARIO, transport="serial", baud_rate=SERIAL_BAUD) as (device, control_address), \
            BenchControlClient(control_address) as control:
        control.request("set", noise=False)
        control.connect(1, "TM150-0001", "good-termination")
        analyzer = open_analyzer(device, "tarnmoor-serial-analyzer", "serial")
        try:
            analyzer.configure(SERIAL_PLAN)
            analyzer.measure(["S11"])
            session = analyzer.session
            command = analyzer.profile.operation("read_raw").render(parameter="s11")
            rows = lambda: session.query_rows(command, 3)  # noqa: E731
            timings = time_actions({"driver": rows}, repeat, rounds=1)
            assert rows().shape == (SERIAL_PLAN.points, 3)
        finally:
            analyzer.close()
        with serial.serial_for_url(device, baudrate=SERIAL_BAUD, timeout=5) as port:
            _raw_serial_exchange(port, b"")  # in step: an empty line gets the prompt only
            wire = _raw_serial_exchange(port, command.encode())
            raw = time_actions({"raw": lambda: _raw_serial_exchange(port, command.encode())}, repeat, rounds=1)
    # Every byte the host receives (echo, rows, end line, prompt) crosses the line at 10 bits;
    # the command's own bytes cross the other way while their echo comes back.
    wire_time = len(wire) * 10 / SERIAL_BAUD
    print(f"4. serial line at {SERIAL_BAUD} baud (simulated instrument paced at 10 bits per byte, own process): "
          f"'{command}' for {SERIAL_PLAN.points} points, {len(wire)} bytes back, wire time {wire_time * 1e3:.1f} ms")
    print(f"   driver (echo, rows, count check, prompt) {timings['driver'] * 1e3:.1f} ms; "
          f"transfer time / wire time = {timings['driver'] / wire_time:.3f}   (goal <= 1.05)")
    print(f"   plain pyserial read to the prompt         {raw['raw'] * 1e3:.1f} ms; "
          f"transfer time / wire time = {raw['raw'] / wire_time:.3f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--repeat", type=int, default=20, help="calls per action and round")
    arguments = parser.parse_args()
    bench_tcp(arguments.repeat)
    bench_serial(max(3, arguments.repeat // 4))


if __name__ == "__main__":
    main()
