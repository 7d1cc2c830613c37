"""``lineproof check SEQUENCE``: every problem of a sequence, before any instrument is touched."""

from __future__ import annotations

import argparse
import json
import math

from lineproof.errors import InputError
from lineproof.figures import AS_TERMINATED, FIGURES
from lineproof.run_command import problems_as_json
from lineproof.sequence import SequenceSpec, load_sequence
from lineproof.sequence_methods import TWO_PORT_METHODS, judged_figures
from lineproof.values import BandLimit


def describe(spec: SequenceSpec) -> list[str]:
    """A short account of what the sequence will do."""
    station = spec.station
    where = f"simulated bench {station.simulated_bench}" if station.simulated_bench else station.analyzer.resource
    lines = [
        f"sequence: {spec.name}",
        f"station: {station.name} ({where}; analyzer profile {station.analyzer.profile}, "
        f"{station.analyzer.transport}, port {station.analyzer.port}; connected by {station.connected_by})",
        f"sweep: {spec.plan.describe()}" + (" (in segments if needed)" if spec.allow_segments else ""),
        "bands: " + "; ".join(f"{b.name} {b.start_hz / 1e6:g}-{b.stop_hz / 1e6:g} MHz {_limits(b)}" for b in spec.bands),
        "steps: " + ", ".join(step.action for step in spec.steps),
    ]
    if spec.calibration is not None:
        chosen = f" (chosen by lineproof: {spec.calibration.chosen})" if spec.calibration.chosen else ""
        lines.append(f"calibration: {spec.calibration.method}{chosen}, kit {spec.calibration.kit}")
        lines.append(_figures(spec))
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


def _limits(band: BandLimit) -> str:
    parts = [] if math.isinf(band.max_vswr) else [f"VSWR <= {band.max_vswr:g}:1"]
    if band.min_return_loss_db is not None:
        parts.append(f"return loss >= {band.min_return_loss_db:g} dB")
    if band.max_insertion_loss_db is not None:
        parts.append(f"insertion loss <= {band.max_insertion_loss_db:g} dB")
    return ", ".join(parts)


def _figures(spec: SequenceSpec) -> str:
    judged = judged_figures(spec)
    two_port = spec.calibration is not None and spec.calibration.method in TWO_PORT_METHODS
    text = "judged on: " + ", ".join(
        f"{name} ({spec.measurement.as_terminated})" if name == AS_TERMINATED and two_port else name for name in judged)
    beside = [name for name in FIGURES if name not in judged] if two_port else []
    return text + (f"; reported beside: {', '.join(beside)}" if beside else "")


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
