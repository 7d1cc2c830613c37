"""``lineproof demo``: the whole job once, unattended, on a simulated bench with a switch matrix.

It runs the shipped sequence ``demo-switch.toml`` through the same runner as ``lineproof run``:
a simulated two-port analyzer and switch matrix served as SCPI instruments on 127.0.0.1 and
reached through pyvisa/pyvisa-py exactly like hardware; the switch routes the standards, the
termination, the check standard and twelve device slots to port 1.  Calibrate, qualify the
termination, verify, measure the twelve invented meter heads, re-verify, then the report.
"""

from __future__ import annotations

import argparse
import sys
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import TextIO

from lineproof import __version__
from lineproof.metrics import vswr_from_reflection
from lineproof.recording import RecordedDevice
from lineproof.run_steps import StopSignal
from lineproof.run_view import ConsoleRunView
from lineproof.runner import RunOptions, RunOutcome, start_run
from lineproof.sequence import SequenceSpec, check_sequence_text, load_sequence, read_text

DEMO_SEQUENCE = "demo-switch.toml"


@dataclass
class DemoOutcome:
    run_id: str
    outcome: RunOutcome
    files: list[Path]
    database: Path
    folder: Path


def demo_sequence(termination: str | None = None) -> SequenceSpec:
    """The shipped demo sequence; with ``termination``, the same sequence with another
    termination on the devices' outputs (its text changed, so its record says so)."""
    path = Path(str(resources.files("lineproof.sequences") / DEMO_SEQUENCE))
    if termination is None:
        return load_sequence(path)
    text = read_text(path).replace('name = "good-termination"', f'name = "{termination}"', 1)
    return check_sequence_text(text, str(path))


def _vswr(reflection: float | None) -> float:
    return float("nan") if reflection is None else float(vswr_from_reflection(reflection))


def print_table(recorded: list[RecordedDevice], out: TextIO) -> None:
    """Worst VSWR per band, and with the expanded uncertainty added ('with U')."""
    header = (f"{'serial':<12} {'model':<26} {'band':<6} {'worst VSWR':>10} {'at MHz':>8} {'with U':>7} "
              f"{'limit':>6}  verdict")
    print(header, file=out)
    print("-" * len(header), file=out)
    for device in sorted(recorded, key=lambda d: d.position):
        result = device.result
        for index, band in enumerate(result.bands):
            serial = result.device.serial if index == 0 else ""
            model = result.device.model if index == 0 else ""
            print(f"{serial:<12} {model:<26} {band.limit.name:<6} {band.worst_vswr:>10.3f} "
                  f"{band.worst_frequency_hz / 1e6:>8.1f} {_vswr(band.worst_upper_reflection):>7.3f} "
                  f"{band.limit.max_vswr:>6.2f}  {band.verdict.value}", file=out)
    if recorded:
        print(f"'with U': worst VSWR with the expanded uncertainty (k = 2) added; decision: "
              f"{recorded[0].result.bands[0].decision_rule}", file=out)


def run_demo(out_dir: Path, termination: str | None = None, out: TextIO = sys.stdout) -> DemoOutcome:
    """Run the demo; a run that cannot complete is reported in the outcome's status."""
    spec = demo_sequence(termination)
    print(f"lineproof {__version__} demo: {spec.name}", file=out)
    view = ConsoleRunView(out)
    outcome = start_run(spec, RunOptions(records=Path(out_dir), operator="demo (simulated operator)"), view, StopSignal())
    view.close()
    if outcome.recorded:
        print("", file=out)
        print_table(outcome.recorded, out)
    summary = outcome.summary()
    if outcome.status == "complete":
        from lineproof.report_command import make_report

        summary["report"] = str(make_report(outcome.run_id, outcome.records).html)
    view.run_finished(summary)
    files = sorted(d.file for d in outcome.recorded)
    return DemoOutcome(outcome.run_id, outcome, files, outcome.database, outcome.run_folder)


def _command(arguments: argparse.Namespace) -> int:
    termination = "poor-termination" if arguments.worn_termination else None
    result = run_demo(Path(arguments.out), termination=termination)
    if result.outcome.status != "complete":
        print(f"lineproof: run stopped: {result.outcome.reason}", file=sys.stderr)
        return 2
    return 0


def register(commands: argparse._SubParsersAction) -> None:
    """Add ``lineproof demo`` to the command line."""
    demo = commands.add_parser(
        "demo", help="run the whole job once on a simulated bench (no hardware needed)",
        description="Start a simulated analyzer on 127.0.0.1, calibrate it, qualify the termination, "
        "measure a batch of invented meter heads and write Touchstone files and a results database.",
    )
    demo.add_argument("--out", default="lineproof-demo", metavar="DIR",
                      help="folder for the results database and Touchstone files (default: ./lineproof-demo)")
    demo.add_argument("--worn-termination", action="store_true",
                      help="use the bench's worn termination, to see the run refuse it")
    demo.set_defaults(handler=_command)
