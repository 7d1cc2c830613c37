"""``lineproof sim SCENARIO``: serve a simulated bench until Ctrl-C, for rehearsing your own
sequences without hardware.

It prints what a station file needs -- the VISA resource of each SCPI analyzer and of the
switch matrix, the device path of each serial analyzer -- and the address of the bench
control channel (simulated-instruments/PROTOCOLS.md §3), then serves until interrupted.
"""

from __future__ import annotations

import argparse
import signal
import sys
import threading
from types import FrameType
from typing import TYPE_CHECKING, TextIO

if TYPE_CHECKING:
    from lineproof.simulators.bench import SimulatedBench

_MODEL_WORDS = {"reflection": "one-port (reflection)", "forward": "two-port, one path", "full": "full two-port"}
#: Shipped profiles that speak to each SCPI model as served (drivers/profiles/).
_PROFILE_HINTS = {"reflection": "generic-scpi-reflectometer", "full": "generic-scpi-analyzer"}


def describe_bench(bench: SimulatedBench, out: TextIO) -> None:
    """Print where each instrument of a started bench is served."""
    scenario = bench.scenario
    print(f"simulated bench: {scenario.name}", file=out)
    print(f"scenario file:   {scenario.source}", file=out)
    for spec in scenario.analyzers:
        settings = spec.settings
        what = (f"{_MODEL_WORDS[settings.model]}, {settings.frequency_min_hz / 1e6:g}-"
                f"{settings.frequency_max_hz / 1e6:g} MHz, at most {settings.max_points} points")
        if spec.transport == "serial":
            where = f"serial port {bench.serial_ports[spec.name]}  ({spec.baud_rate} baud, 8N1)"
        else:
            where = f"VISA resource {bench.visa_resources[spec.name]}"
        print(f"{spec.name:<10} {where}", file=out)
        print(f"{'':<10} {settings.identity.split(',')[1].strip()}: {what}", file=out)
        if spec.transport == "scpi" and settings.model in _PROFILE_HINTS:
            print(f"{'':<10} profile: {_PROFILE_HINTS[settings.model]}", file=out)
    if scenario.switch is not None:
        print(f"{'switch':<10} VISA resource {bench.switch_resource}  "
              f"({len(scenario.switch_wiring)} channels wired)", file=out)
    print(f"{'control':<10} {bench.control_address}  (bench control channel, JSON lines)", file=out)
    print(f"{len(scenario.objects)} objects, {len(scenario.devices)} devices; "
          f"the control channel's op \"objects\" lists them", file=out)


def serve(scenario: str, scpi_port: int = 0, control_port: int = 0, out: TextIO = sys.stdout,
          stop: threading.Event | None = None) -> int:
    """Start the bench, print its addresses, serve until Ctrl-C (or ``stop``), stop cleanly."""
    from lineproof.simulators.bench import SimulatedBench

    bench = SimulatedBench(scenario, scpi_port=scpi_port, control_port=control_port)
    stop = stop or threading.Event()
    previous = _stop_on_terminate(stop)
    try:
        bench.start()
        describe_bench(bench, out)
        print("serving; press Ctrl-C to stop", file=out, flush=True)
        while not stop.wait(0.2):
            pass
    except KeyboardInterrupt:
        pass
    finally:
        bench.stop()
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)
        print("bench stopped", file=out, flush=True)
    return 0


def _stop_on_terminate(stop: threading.Event) -> signal.Handlers | None:
    """SIGTERM stops the bench as cleanly as Ctrl-C (only the main thread may set handlers)."""
    if threading.current_thread() is not threading.main_thread():
        return None

    def handler(signum: int, frame: FrameType | None) -> None:
        stop.set()

    return signal.signal(signal.SIGTERM, handler)


def _command(arguments: argparse.Namespace) -> int:
    from lineproof.simulators.scenario import shipped_scenarios

    if arguments.list or not arguments.scenario:
        print("shipped scenarios: " + ", ".join(shipped_scenarios()))
        print("or give the path of your own scenario file (see DEVELOPERS.md, 'Running the simulators')")
        return 0
    return serve(arguments.scenario, arguments.scpi_port, arguments.control_port)


def register(commands: argparse._SubParsersAction) -> None:
    """Add ``lineproof sim`` to the command line."""
    sim = commands.add_parser(
        "sim", help="serve a simulated bench (analyzers, switch, control channel) until Ctrl-C",
        description="Start the simulated instruments of a scenario on 127.0.0.1 and on pseudo-terminals, "
        "print their VISA resources, serial ports and the bench control address, and serve them "
        "until Ctrl-C.",
    )
    sim.add_argument("scenario", nargs="?", metavar="SCENARIO",
                     help="a shipped scenario's name (e.g. demo-bench) or a scenario .toml file")
    sim.add_argument("--list", action="store_true", help="list the shipped scenarios and exit")
    sim.add_argument("--scpi-port", type=int, default=0, metavar="PORT",
                     help="TCP port of the first SCPI analyzer (default: any free port)")
    sim.add_argument("--control-port", type=int, default=0, metavar="PORT",
                     help="TCP port of the bench control channel (default: any free port)")
    sim.set_defaults(handler=_command)
