"""``lineproof demo``: the whole job once, on a simulated bench, with nothing to install.

A simulated one-port analyzer is served as a SCPI instrument on 127.0.0.1 and reached
through pyvisa/pyvisa-py exactly like hardware; a simulated operator connects standards,
the termination and each device through the bench's control channel.
"""

from __future__ import annotations

import argparse
import hashlib
import sys
import uuid
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import TextIO

from lineproof import __version__, steps
from lineproof.calkit import load_kit
from lineproof.errors import LineproofError
from lineproof.metrics import vswr_from_reflection
from lineproof.store import ResultStore
from lineproof.touchstone import check_serial, format_one_port, write_new_file
from lineproof.uncertainty import UncertaintySettings
from lineproof.values import (
    BandLimit,
    CalibrationRecord,
    DeviceIdentity,
    DeviceResult,
    SweepPlan,
    TerminationQualification,
)

DEMO_SCENARIO = "demo-bench"
DEMO_PROFILE = "generic-scpi-reflectometer"
DEMO_KIT = "kits/n50-illustrative.toml"
DEMO_PLAN = SweepPlan(100e6, 500e6, 401, if_bandwidth_hz=1000.0)
# Invented limits for an invented product: 2 m and 70 cm amateur bands.
DEMO_BANDS = (
    BandLimit("2m", 144e6, 148e6, max_vswr=1.10),
    BandLimit("70cm", 420e6, 450e6, max_vswr=1.20),
)
REFERENCE_PLANE = "analyzer port 1 connector (end of the test-port cable)"
DEMO_RULE = "guard-banded"
# What the invented workshop knows of its own bench: connector repeatability from a
# repeatability study (RMS |Γ| a reconnection adds at 1 GHz); trace noise is estimated from
# the data.  Invented for the demo.
DEMO_UNCERTAINTY = UncertaintySettings(connection_repeatability=0.0003)
UNCERTAINTY_METHOD = ("GUM (JCGM 100:2008) propagation of the kit's stated standard deviations, connector "
                      "repeatability, trace noise and the termination's mismatch; EURAMET cg-12 v3.0 residual-error model")


@dataclass
class DemoOutcome:
    run_id: str
    results: list[DeviceResult]
    files: list[Path]
    database: Path
    folder: Path


def _run_id() -> str:
    return f"run-{datetime.now(UTC):%Y%m%dT%H%M%SZ}-{uuid.uuid4().hex[:6]}"


def _metadata(run_id: str, bench_name: str, station: steps.Station, profile: str, cal: CalibrationRecord,
              qualification: TerminationQualification, result: DeviceResult, sequence_hash: str) -> list[tuple[str, object]]:
    plan = station.plan
    items: list[tuple[str, object]] = [
        ("software", f"lineproof {__version__}"),
        ("run.id", run_id),
        ("sequence", "built-in demo"),
        ("sequence.sha256", sequence_hash),
        ("station", bench_name),
        ("operator", "simulated operator"),
        ("device.serial", result.device.serial),
        ("device.model", result.device.model),
        ("measured_utc", result.measured_utc),
        ("data", f"as-terminated input reflection, device output on {qualification.name}"),
        ("reference_plane", REFERENCE_PLANE),
        ("analyzer.identity", station.identity.describe()),
        ("analyzer.resource", station.identity.resource),
        ("analyzer.profile", profile),
        ("sweep.start_hz", f"{plan.start_hz:.10g}"),
        ("sweep.stop_hz", f"{plan.stop_hz:.10g}"),
        ("sweep.points", plan.points),
        ("sweep.if_bandwidth_hz", f"{plan.if_bandwidth_hz:g}"),
        ("calibration.id", cal.calibration_id),
        ("calibration.method", cal.method),
        ("calibration.kit", cal.kit_name),
        ("calibration.kit_sha256", cal.kit_hash),
        ("calibration.created_utc", cal.created_utc),
        ("termination.name", qualification.name),
        ("termination.worst_vswr", f"{qualification.worst_vswr:.4f}"),
        ("termination.limit_vswr", f"{qualification.limit_vswr:.3f}"),
        ("termination.expanded_uncertainty", f"{qualification.expanded_uncertainty:.5f}"),
        ("termination.result", "qualified" if qualification.passed else "rejected"),
        ("uncertainty.method", UNCERTAINTY_METHOD),
        ("uncertainty.coverage", "expanded, k = 2 (95.45 %), k from the distribution where a bounded term dominates"),
    ]
    for band in result.bands:
        prefix = f"band.{band.limit.name}"
        items += [
            (f"{prefix}.range_hz", f"{band.limit.start_hz:.10g}..{band.limit.stop_hz:.10g}"),
            (f"{prefix}.limit_vswr", f"{band.limit.max_vswr:.3f}"),
            (f"{prefix}.worst_vswr", f"{band.worst_vswr:.4f}"),
            (f"{prefix}.worst_frequency_hz", f"{band.worst_frequency_hz:.10g}"),
            (f"{prefix}.expanded_uncertainty", f"{band.expanded_uncertainty:.5f}"),
            (f"{prefix}.worst_upper_vswr", f"{_vswr(band.worst_upper_reflection):.4f}"),
            (f"{prefix}.verdict", band.verdict.value),
        ]
    items += [("decision_rule", result.bands[0].decision_rule), ("verdict", result.verdict.value)]
    return items


def _vswr(reflection: float | None) -> float:
    return float("nan") if reflection is None else float(vswr_from_reflection(reflection))


def _print_table(results: list[DeviceResult], out: TextIO) -> None:
    header = (f"{'serial':<12} {'model':<26} {'band':<6} {'worst VSWR':>10} {'at MHz':>8} {'with U':>7} "
              f"{'limit':>6}  verdict")
    print(header, file=out)
    print("-" * len(header), file=out)
    for result in results:
        for index, band in enumerate(result.bands):
            serial = result.device.serial if index == 0 else ""
            model = result.device.model if index == 0 else ""
            print(
                f"{serial:<12} {model:<26} {band.limit.name:<6} {band.worst_vswr:>10.3f} "
                f"{band.worst_frequency_hz / 1e6:>8.1f} {_vswr(band.worst_upper_reflection):>7.3f} "
                f"{band.limit.max_vswr:>6.2f}  {band.verdict.value}",
                file=out,
            )
    counts = {v: sum(1 for r in results if r.verdict.value == v) for v in ("pass", "fail", "indeterminate")}
    print(f"\n{len(results)} devices: {counts['pass']} passed, {counts['fail']} failed, "
          f"{counts['indeterminate']} indeterminate", file=out)
    print("'with U': worst VSWR plus the expanded uncertainty (k = 2); decision: "
          f"{results[0].bands[0].decision_rule if results else ''}", file=out)


def run_demo(out_dir: Path, termination: str = "good-termination", out: TextIO = sys.stdout) -> DemoOutcome:
    """Run the demo; raises :class:`LineproofError` (e.g. RunHalted) when it cannot finish."""
    from lineproof.drivers import open_analyzer
    from lineproof.operators import SimulatedOperator
    from lineproof.simulators.bench import SimulatedBench

    out_dir = Path(out_dir)
    run_id = _run_id()
    kit = load_kit(DEMO_KIT)
    sequence_hash = hashlib.sha256(repr((DEMO_SCENARIO, DEMO_PROFILE, DEMO_PLAN, DEMO_BANDS, termination)).encode()).hexdigest()
    with SimulatedBench(DEMO_SCENARIO) as bench:
        print(f"lineproof {__version__} demo -- {bench.scenario.name}", file=out)
        print(f"simulated analyzer served at {bench.visa_resource}", file=out)
        analyzer = open_analyzer(bench.visa_resource, DEMO_PROFILE)
        operator = SimulatedOperator(bench.control_address)
        store = ResultStore(out_dir / "results.sqlite")
        try:
            identity = analyzer.identify()
            print(f"identified: {identity.describe()}", file=out)
            analyzer.configure(DEMO_PLAN)
            print(f"sweep: {DEMO_PLAN.describe()}", file=out)
            station = steps.Station(analyzer, operator, identity, DEMO_PLAN, uncertainty=DEMO_UNCERTAINTY)
            store.start_run({
                "run_id": run_id, "started_utc": datetime.now(UTC).isoformat(timespec="seconds"),
                "status": "running", "sequence_name": "built-in demo", "station": bench.scenario.name,
                "operator": "simulated operator", "software_version": __version__,
                "analyzer": identity.describe(), "resource": identity.resource, "sweep_plan": DEMO_PLAN.describe(),
            })
            cal = steps.calibrate_one_port(station, kit)
            store.record_calibration(run_id, cal.calibration_id, cal.method, kit.name)
            print(f"calibrated: {cal.method}, kit {kit.name} -> {cal.calibration_id}", file=out)
            try:
                qualified = steps.measure_termination(station, cal, termination)
            except LineproofError:
                store.finish_run(run_id, "halted: termination failed qualification",
                                 datetime.now(UTC).isoformat(timespec="seconds"))
                raise
            qualification = qualified.qualification
            store.record_termination(run_id, qualification)
            print(f"termination {qualification.describe()}", file=out)
            devices = [DeviceIdentity(check_serial(serial), model) for serial, model in bench.scenario.devices]
            print(f"measuring {len(devices)} devices, each with its output on {termination}\n", file=out)
            folder = out_dir / "runs" / run_id
            results, files = [], []
            for device in devices:
                result, frequencies, corrected = steps.measure_device(
                    station, cal, device, qualified, DEMO_BANDS, DEMO_RULE)
                text = format_one_port(frequencies, corrected, kit.reference_impedance_ohm,
                                       _metadata(run_id, bench.scenario.name, station, DEMO_PROFILE, cal,
                                                 qualification, result, sequence_hash))
                path = write_new_file(folder, device.serial, ".s1p", text)
                store.record_device(run_id, result, path.relative_to(out_dir).as_posix())
                results.append(result)
                files.append(path)
            store.finish_run(run_id, "complete", datetime.now(UTC).isoformat(timespec="seconds"))
        finally:
            store.close()
            operator.close()
            analyzer.close()
    _print_table(results, out)
    print(f"\nTouchstone files: {folder}", file=out)
    print(f"Results database: {out_dir / 'results.sqlite'} (run {run_id})", file=out)
    return DemoOutcome(run_id, results, files, out_dir / "results.sqlite", folder)


def _command(arguments: argparse.Namespace) -> int:
    termination = "poor-termination" if arguments.worn_termination else "good-termination"
    run_demo(Path(arguments.out), termination=termination)
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
