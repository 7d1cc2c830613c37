"""Benchmark: the simulator must never be the bottleneck of a driver benchmark.

Prints, for a 10,001-point sweep, the simulator's compute time (the model's sweep plus the
encoding of every trace it serves) as a fraction of the time the sweep's traces take to
cross TCP to a client (through pyvisa-py and the project's drivers).  Goal: below 0.2.

The server runs in its own process (``lineproof sim``), as a user runs it, so the client's
timing is not shared with the server's threads; the compute time is measured in this
process on the same model code.  Run it on a quiet machine:

    .venv/bin/python tests/bench/bench_simulator.py [--repeats N]
"""

from __future__ import annotations

import argparse
import queue
import re
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable
from contextlib import closing
from pathlib import Path

POINTS = 10001
PLAN_HZ = (1e6, 3e9)


def _median_s(action: Callable[[], object], repeats: int) -> float:
    action()  # warm up (caches, first allocation)
    times = []
    for _ in range(repeats):
        started = time.perf_counter()
        action()
        times.append(time.perf_counter() - started)
    return statistics.median(times)


def compute_times(scenario: str, connect: Callable[[object], None], data_format: str,
                  repeats: int) -> dict[str, float]:
    """Model sweep (+ encoding of every served trace) per 10,001-point sweep, in seconds:
    repeated on an unchanged bench, and right after a reconnection (nothing cached)."""
    from lineproof.simulators.bench import SimulatedBench
    from lineproof.simulators.scpi_analyzer import AnalyzerScpiFront

    bench = SimulatedBench(scenario)
    model = bench.analyzer
    model.start_hz, model.stop_hz, model.points = *PLAN_HZ, POINTS
    front = AnalyzerScpiFront(model)
    front.data_format, front.byte_order = data_format, "little"

    def encode_all() -> None:
        for parameter in model.settings.parameters:
            model.parameter = parameter
            front._trace("RAW")

    connect(bench)
    try:
        times = {
            "sweep": _median_s(model.sweep, repeats),
            "encode": _median_s(encode_all, repeats),
            # the bench clock ticks on (once a second): drifting terms are recomputed
            "sweep_new_tick": _median_s(lambda: (bench.environment.advance(1.0), model.sweep()), repeats),
        }
        # the same with the temperature held: only the drift with time (the tracking) moves
        bench.environment.set_temperature(bench.environment.now().temperature_c)
        times["sweep_new_tick_held"] = _median_s(lambda: (bench.environment.advance(1.0), model.sweep()), repeats)
        times["sweep_after_reconnect"] = _median_s(lambda: (connect(bench), model.sweep()), repeats)
        return times
    finally:
        bench.stop()


def _start_sim(scenario: str) -> tuple[subprocess.Popen[str], str, str]:
    process = subprocess.Popen([sys.executable, "-m", "lineproof.cli", "sim", scenario],
                               stdout=subprocess.PIPE, text=True)
    lines: queue.Queue[str] = queue.Queue()
    threading.Thread(target=lambda: [lines.put(line) for line in process.stdout], daemon=True).start()
    resource = control = ""
    while True:
        line = lines.get(timeout=60)
        if found := re.match(r"^analyzer\s+VISA resource (\S+)", line):
            resource = found.group(1)
        if found := re.match(r"^control\s+(\S+)", line):
            control = found.group(1)
        if "serving" in line:
            return process, resource, control


#: The trace reads of the shipped SCPI profiles; an ASCII variant must read them as an ASCII
#: number list (reply "numbers"): the profile loader refuses a block reply with ASCII data.
TRACE_READS = {"read_raw": "TRACe:DATA? RAW", "read_corrected": "TRACe:DATA? CORRected",
               "read_frequencies": "SENSe:FREQuency:DATA?"}


def format_variant(profile: str, data_format: str) -> str:
    """A profile of our own, based on a shipped one, that asks for ``data_format``."""
    command = "FORMat:DATA ASCii" if data_format == "ASCII" else "FORMat:DATA REAL,64;:FORMat:BORDer SWAPped"
    reply = "numbers" if data_format == "ASCII" else "block"
    reads = "".join(f'{name} = {{ send = "{send}", reply = "{reply}" }}\n' for name, send in TRACE_READS.items())
    return (f'[profile]\nname = "bench-format"\nkind = "analyzer"\nbased_on = "{profile}"\nsummary = "benchmark"\n'
            f'[capabilities]\ndata_format = "{data_format}"\nbyte_order = "little"\n'
            f'[operations]\nset_data_format = "{command}"\n{reads}')


def transfer_time(scenario: str, profile: str, connect_request: dict[str, object], data_format: str,
                  repeats: int) -> dict[str, float]:
    """Client-side time to read every trace of one 10,001-point sweep over TCP."""
    from lineproof.drivers import open_analyzer
    from lineproof.drivers.profiles import load_analyzer_profile
    from lineproof.simulators.control import BenchControlClient
    from lineproof.values import SweepPlan

    process, resource, control_address = _start_sim(scenario)
    try:
        with BenchControlClient(control_address) as control:
            control.request("connect", **connect_request)
        with tempfile.TemporaryDirectory() as folder:
            # A profile of our own, based on the shipped one, that asks for the data format
            # under test (DEVELOPERS.md, "Adding an instrument profile").
            path = Path(folder) / "bench-format.toml"
            path.write_text(format_variant(profile, data_format), encoding="utf-8")
            loaded = load_analyzer_profile(str(path))
        with closing(open_analyzer(resource, loaded)) as analyzer:
            analyzer.configure(SweepPlan(*PLAN_HZ, POINTS, if_bandwidth_hz=100e3))
            parameters = list(analyzer.capabilities.parameters)
            analyzer.measure(parameters)
            session = analyzer.session

            def read_all() -> None:
                for parameter in parameters:
                    session.write(f'SENSe:FUNCtion "XFRequency:{parameter}"')
                    if data_format == "ASCII":
                        session.query_numbers("TRACe:DATA? RAW", 30)
                    else:
                        session.query_block("TRACe:DATA? RAW", 30)

            return {"transfer": _median_s(read_all, repeats),
                    "measure": _median_s(lambda: analyzer.measure(parameters), max(3, repeats // 3))}
    finally:
        process.terminate()
        process.wait(timeout=15)
        process.stdout.close()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=15)
    args = parser.parse_args()
    cases = [
        ("one-port (demo-bench)", "demo-bench", "generic-scpi-reflectometer",
         lambda b: b.analyzer.connect(1, b.scenario.objects["TM150-0001"], b.scenario.objects["good-termination"]),
         {"port": 1, "object": "TM150-0001", "output": "good-termination"}),
        ("full two-port (demo-switch)", "demo-switch", "generic-scpi-analyzer",
         lambda b: b.analyzer.connect(1, b.scenario.objects["TM150-0101"], output_port=2),
         {"port": 1, "object": "TM150-0101", "output": "port:2"}),
    ]
    print(f"simulator compute vs TCP transfer, {POINTS}-point sweep, median of {args.repeats}")
    columns = (("sweep", "warm"), ("sweep_new_tick", "tick"), ("sweep_new_tick_held", "held tick"),
               ("sweep_after_reconnect", "cold"))
    print(f"{'bench':<29} {'format':<8} {'traces':>6} {'encode ms':>10} {'transfer ms':>12} "
          + " ".join(f"{name + ' ms':>12} {'ratio':>6}" for _, name in columns))
    for label, scenario, profile, connect, request in cases:
        for data_format in ("REAL,64", "ASCII"):
            compute = compute_times(scenario, connect, data_format, args.repeats)
            transfer = transfer_time(scenario, profile, request, data_format, args.repeats)["transfer"]
            traces = 1 if "one-port" in label else 4
            cells = " ".join(f"{compute[key] * 1e3:>12.2f} {(compute[key] + compute['encode']) / transfer:>6.3f}"
                             for key, _ in columns)
            print(f"{label:<29} {data_format:<8} {traces:>6} {compute['encode'] * 1e3:>10.2f} "
                  f"{transfer * 1e3:>12.2f} {cells}")
    print("'... ms': the model's sweep; ratio = (sweep + encode) / transfer, goal < 0.2.  'warm': a repeated sweep; "
          "'tick': the bench clock\nmoved on a second (demo-switch's temperature follows its profile: its drifting "
          "terms are solved again); 'held tick':\nthe same with the temperature held (only the tracking drifts "
          "with time); 'cold': right after a reconnection, nothing cached.")


if __name__ == "__main__":
    main()
