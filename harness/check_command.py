"""``lineproof check SEQUENCE``: every problem of a sequence, before any instrument is touched."""

from __future__ import annotations

import argparse
import json

from lineproof.errors import InputError
from lineproof.run_command import problems_as_json
from lineproof.sequence import SequenceSpec, load_sequence


def describe(spec: SequenceSpec) -> list[str]:
    """A short account of what the sequence will do."""
    station = spec.station
    where = f"simulated bench {station.simulated_bench}" if station.simulated_bench else station.analyzer.resource
    lines = [
        f"sequence: {spec.name}",
        f"station: {station.name} ({where}; analyzer profile {station.analyzer.profile}, "
        f"{station.analyzer.transport}, port {station.analyzer.port}; connected by {station.connected_by})",
        f"sweep: {spec.plan.describe()}" + (" (in segments if needed)" if spec.allow_segments else ""),
        "bands: " + ", ".join(f"{b.name} {b.start_hz / 1e6:g}-{b.stop_hz / 1e6:g} MHz <= {b.max_vswr:g}:1"
                              for b in spec.bands),
        "steps: " + ", ".join(step.action for step in spec.steps),
    ]
    if spec.devices is not None:
        count = f"{len(spec.devices.units)} listed" if spec.devices.entry == "listed" else "serials entered at the bench"
        lines.append(f"devices: {spec.devices.model}, {count}")
    if spec.reverify.any:
        r = spec.reverify
        parts = [f"every {r.every_devices} devices" if r.every_devices else "",
                 f"every {r.every_minutes:g} min" if r.every_minutes else "", "at the end" if r.at_end else ""]
        lines.append("re-verify: " + ", ".join(p for p in parts if p))
    check = spec.check_standard
    if check is not None:
        judged = ("En <= 1 per band" if check.criterion == "En" else f"largest deviation of |Γ| <= {check.tolerance:g}")
        lines.append(f"check standard: {check.name}, judged by {judged}; {check.repeats} connection(s) per check; "
                     f"control limits from the first {check.baseline_checks} checks")
    if spec.study is not None:
        operators = ", ".join(spec.study.operators) or "the run's operator"
        lines.append(f"repeatability study: {spec.study.reconnections} connections of each device by {operators}")
    lines.append(f"decision: {spec.decision_rule} acceptance")
    return lines


def _command(arguments: argparse.Namespace) -> int:
    try:
        spec = load_sequence(arguments.sequence, arguments.station)
    except InputError as exc:
        if not arguments.json:
            raise
        print(json.dumps({"ok": False, "problems": problems_as_json(exc)}, indent=2))
        return 3
    if arguments.json:
        print(json.dumps({"ok": True, "sequence": spec.name, "sha256": spec.sha256, "summary": describe(spec)}, indent=2))
    else:
        print(f"{arguments.sequence}: no problems found")
        for line in describe(spec):
            print(f"  {line}")
    return 0


def register(commands: argparse._SubParsersAction) -> None:
    """Add ``lineproof check`` to the command line."""
    check = commands.add_parser(
        "check", help="check a sequence file and everything it names, touching no instrument",
        description="Report every problem of a sequence (file, line, key and fix): unknown keys, wrong types, "
        "bands outside the analyzer's range, more points than it can sweep, a calibration method it cannot do, "
        "missing kits, objects or switch wiring.",
    )
    check.add_argument("sequence", metavar="SEQUENCE", help="the sequence file (.toml)")
    check.add_argument("--station", metavar="FILE", help="a station file that replaces the sequence's [station]")
    check.add_argument("--json", action="store_true", help="print the result as JSON")
    check.set_defaults(handler=_command)
