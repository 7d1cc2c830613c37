"""``lineproof instruments``: list the VISA resources and serial ports of this machine and,
with ``--identify``, who answers on each.  The asking is the drivers' (no command strings
here); this module only shows the answer."""

from __future__ import annotations

import argparse
import json
import sys
from dataclasses import asdict
from typing import TextIO

from lineproof.drivers.discovery import Discovery, discover


def _print(discovery: Discovery, identify: bool, out: TextIO) -> None:
    for transport, title in (("visa", "VISA resources"), ("serial", "serial ports (pyserial)")):
        items = [f for f in discovery.found if f.transport == transport]
        print(f"{title}:", file=out)
        if not items:
            print("  (none found)", file=out)
        width = max((len(f.resource) for f in items), default=0)
        for item in items:
            if item.identity is not None:
                answer = f"{item.identity.describe()}  (asked with {item.profile})"
            elif item.problem:
                answer = f"no answer: {item.problem}"
            else:
                answer = item.description
            print(f"  {item.resource:<{width}}  {answer}".rstrip(), file=out)
    if discovery.notes:
        print("not searched or limited:", file=out)
        for note in discovery.notes:
            print(f"  {note}", file=out)
    if not identify:
        print("(add --identify to ask each one who it is)", file=out)


def _command(arguments: argparse.Namespace, out: TextIO | None = None) -> int:
    out = out or sys.stdout
    discovery = discover(identify=arguments.identify, extra=arguments.resource, timeout_s=arguments.timeout,
                         library=arguments.visa_library, profile_names=arguments.serial_profile,
                         search=not arguments.no_search)
    if arguments.json:
        json.dump({"found": [asdict(f) for f in discovery.found], "notes": discovery.notes}, out, indent=2)
        print(file=out)
    else:
        _print(discovery, arguments.identify, out)
    return 0


def register(commands: argparse._SubParsersAction) -> None:
    """Add ``lineproof instruments`` to the command line."""
    parser = commands.add_parser(
        "instruments", help="list VISA resources and serial ports, and who answers on them",
        description="List the VISA resources the VISA library can find and the serial ports of this machine. "
        "With --identify, ask each one who it is (*IDN? on VISA resources; the identify operation of each "
        "serial profile on serial ports), each within --timeout seconds. TCP socket instruments cannot be "
        "listed: give them with --resource.",
    )
    parser.add_argument("--identify", action="store_true", help="ask each resource and port who it is")
    parser.add_argument("--resource", action="append", default=[], metavar="RESOURCE",
                        help="also look at this VISA resource string (e.g. TCPIP::192.168.1.20::5025::SOCKET) "
                        "or serial port (e.g. /dev/ttyUSB0, COM3, socket://host:port); repeatable")
    parser.add_argument("--serial-profile", action="append", default=[], metavar="PROFILE",
                        help="ask serial ports with this profile (name or file; repeatable; "
                        "default: every shipped serial profile)")
    parser.add_argument("--timeout", type=float, default=2.0, metavar="SECONDS",
                        help="longest wait for each answer (default 2)")
    parser.add_argument("--visa-library", default="@py", metavar="LIBRARY",
                        help="VISA library: @py (pyvisa-py, default), @ivi, or a path to a VISA shared library")
    parser.add_argument("--no-search", action="store_true",
                        help="look only at the --resource entries (skip listing the machine's resources)")
    parser.add_argument("--json", action="store_true", help="print the result as JSON")
    parser.set_defaults(handler=_command)
