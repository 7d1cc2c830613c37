"""`lineproof demo` as a user runs it: a subprocess in an empty folder.  The unattended flow on
the switched demo bench: calibrate, qualify, verify, twelve meter heads, re-verify, report."""

from __future__ import annotations

import re
import sqlite3
import subprocess
import sys
from pathlib import Path

import numpy as np
import skrf
from record_checks import steps_in_pairs
from skrf.network import connect

from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient
from lineproof.store import unpack_arrays
from lineproof.touchstone import read_metadata

REQUIRED_KEYS = {
    "software", "run.id", "measured_utc", "device.serial", "device.model", "analyzer.identity",
    "analyzer.resource", "sweep.start_hz", "sweep.stop_hz", "sweep.points", "calibration.id",
    "calibration.method", "calibration.kit", "termination.name", "termination.result",
    "band.2m.limit_vswr", "band.2m.verdict", "band.70cm.limit_vswr", "band.70cm.verdict", "verdict",
    "band.2m.expanded_uncertainty", "band.70cm.worst_upper_vswr", "termination.expanded_uncertainty",
    "decision_rule", "uncertainty.method", "verification.last.result", "reference_plane",
}
SERIALS = [f"TM150-{n:04d}" for n in range(101, 113)]


def run_cli(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "lineproof.cli", *args], cwd=cwd, capture_output=True,
                          text=True, timeout=120)


def complex_of(value: dict) -> np.ndarray:
    return np.array(value["re"]) + 1j * np.array(value["im"])


def test_demo_runs_the_unattended_flow_and_says_where_the_report_is(tmp_path: Path) -> None:
    completed = run_cli("demo", "--out", "results", cwd=tmp_path)
    assert completed.returncode == 0, completed.stderr
    assert "worst VSWR" in completed.stdout and "TM150-0104" in completed.stdout
    report = re.search(r"^Report: (\S+report\.html)$", completed.stdout, re.MULTILINE)
    assert report and (tmp_path / report.group(1)).is_file()
    files = sorted((tmp_path / "results" / "runs").glob("*/*.s1p"))
    assert [p.stem for p in files] == SERIALS
    verdicts, measured = {}, {}
    for path in files:
        network = skrf.Network(str(path))
        assert network.nports == 1 and network.f.size == 401
        metadata = read_metadata(network.comments)
        assert REQUIRED_KEYS <= set(metadata), REQUIRED_KEYS - set(metadata)
        assert metadata["device.serial"] == path.stem
        assert metadata["analyzer.resource"].startswith("TCPIP::127.0.0.1::")
        assert metadata["termination.result"] == "qualified" and metadata["verification.last.result"] == "passed"
        assert metadata["decision_rule"].startswith("guard-banded acceptance, ILAC-G8:09/2019")
        verdicts[path.stem] = metadata["verdict"]
        measured[path.stem] = network.s[:, 0, 0]
    # The scenario's truth (simulated-instruments/scenarios/demo-switch.toml): 0104 fails in
    # 420-450 MHz, 0109 fails both bands clearly, 0107 passes near the 420-450 MHz limit.
    # With the uncertainty in view, a near miss may be indeterminate -- never a clear pass.
    assert verdicts.pop("TM150-0104") == "fail"
    assert verdicts.pop("TM150-0109") == "fail"
    assert verdicts.pop("TM150-0107") in {"pass", "indeterminate"}
    assert set(verdicts.values()) == {"pass"}
    with sqlite3.connect(tmp_path / "results" / "results.sqlite") as db:
        rows = db.execute("SELECT serial, touchstone, uncertainty FROM devices ORDER BY serial").fetchall()
        checks = db.execute("SELECT devices_before, passed FROM verifications ORDER BY verification_id").fetchall()
        status = db.execute("SELECT status FROM runs").fetchall()
    assert [r[0] for r in rows] == SERIALS and all((tmp_path / "results" / r[1]).is_file() for r in rows)
    assert checks == [(0, 1), (6, 1), (12, 1)] and status == [("complete",)]

    # Against the bench's hidden truth: each device's true as-terminated input reflection --
    # its true S-parameters with the true termination on its output, joined by scikit-rf's
    # ``network.connect`` -- lies within the expanded uncertainty the run recorded, at (nearly) every point.
    grid = {"start_hz": 100e6, "stop_hz": 500e6, "points": 401}
    frequency = skrf.Frequency.from_f(np.linspace(100e6, 500e6, 401), unit="Hz")
    with SimulatedBench("demo-switch") as bench, BenchControlClient(bench.control_address) as control:
        load = skrf.Network(frequency=frequency, s=complex_of(
            control.request("truth_s", object="good-termination", **grid)["s"]["s11"]))
        for serial, _, packed in rows:
            s = {k: complex_of(v) for k, v in control.request("truth_s", object=serial, **grid)["s"].items()}
            device = skrf.Network(frequency=frequency, s=np.stack(
                [np.stack([s["s11"], s["s12"]], -1), np.stack([s["s21"], s["s22"]], -1)], -2))
            truth = connect(device, 1, load, 0).s[:, 0, 0]
            expanded = unpack_arrays(packed)["expanded_uncertainty"]
            inside = np.abs(np.abs(measured[serial]) - np.abs(truth)) <= expanded
            assert np.mean(inside) >= 0.95, serial


def test_demo_refuses_a_worn_termination(tmp_path: Path) -> None:
    completed = run_cli("demo", "--out", "results", "--worn-termination", cwd=tmp_path)
    assert completed.returncode == 2
    assert "poor-termination failed qualification" in completed.stderr
    assert not list((tmp_path / "results").glob("runs/*/*.s1p"))


def test_version_and_help(tmp_path: Path) -> None:
    version = run_cli("--version", cwd=tmp_path)
    assert version.returncode == 0 and version.stdout.startswith("lineproof ")
    help_text = run_cli("--help", cwd=tmp_path)
    assert help_text.returncode == 0
    for command in ("demo", "run", "check", "report", "results"):
        assert command in help_text.stdout


def test_a_closed_pipe_is_not_an_error(tmp_path: Path) -> None:
    # `lineproof ... | head`: the reader closes early; the command must end quietly.
    producer = subprocess.Popen([sys.executable, "-m", "lineproof.cli", "sim", "--list"], cwd=tmp_path,
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    producer.stdout.close()  # nobody reads
    _, error = producer.communicate(timeout=60)
    assert producer.returncode == 0, error
    assert b"BrokenPipe" not in error and b"Traceback" not in error


def test_the_demo_sequences_json_steps_come_in_pairs(tmp_path: Path) -> None:
    import json

    demo_sequence = Path(__file__).parents[2] / "sequences" / "demo-switch.toml"
    completed = run_cli("run", str(demo_sequence), "--records", "rec", "--json", cwd=tmp_path)
    assert completed.returncode == 1, completed.stderr  # 0104 fails (the scenario's truth)
    events = [json.loads(line) for line in completed.stdout.splitlines()]
    pairs = steps_in_pairs(events)
    started = sum(e["event"] == "step-started" for e in events)
    assert started == len(pairs) and all(kind == "step-finished" for _, kind, _ in pairs)
    # calibrate, qualify, the check after calibrating, 12 devices, the checks after 6 and 12, the route
    assert started == 1 + 1 + 1 + 12 + 2 + 1
    assert pairs[-1] == ("routing to good-termination", "step-finished", "routed to good-termination")
    assert [p[0] for p in pairs if p[0].endswith(": connect and sweep")] == [f"{s}: connect and sweep" for s in SERIALS]
    assert events[-1]["event"] == "run-finished"
