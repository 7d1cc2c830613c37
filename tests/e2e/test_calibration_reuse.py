"""A calibration from the records reused by a later run (``[calibration] reuse``), on the batch
test bench (tests/scenarios/batch-bench.toml): the later run measures no standard, still
qualifies the termination and verifies with the check standard, and reads the bench's hidden
truth within its stated uncertainty; it refuses another analyzer, an old calibration and a
sweep the calibration does not cover, each with how to calibrate anew."""

from __future__ import annotations

import json
import shutil
import sqlite3
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
import skrf
from record_checks import check_records_agree, run_cli

from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient
from lineproof.store import unpack_arrays

SCENARIO = Path(__file__).parent.parent / "scenarios" / "batch-bench.toml"
#: Four of batch.toml's ten meter heads (TM150-0004 has a 44-ohm line and fails).
FOUR = {'"TM150-0003", "TM150-0004", "TM150-0005",\n           "TM150-0006", "TM150-0007", "TM150-0008", '
        '"TM150-0009", "TM150-0010"]': '"TM150-0003", "TM150-0004"]'}
DENSE = {"points = 201": "points = 801"}
REUSE = {"valid_for_minutes = 60": 'valid_for_minutes = 60\nreuse = "latest"'}


@pytest.fixture(scope="module")
def first_run(tmp_path_factory: pytest.TempPathFactory, sequence_writer: Callable[..., Path]) -> tuple[Path, str]:
    """Records of one ordinary run (801 points) whose calibration the tests reuse: each test
    copies them."""
    folder = tmp_path_factory.mktemp("first")
    sequence = sequence_writer(folder, "batch.toml", {**FOUR, **DENSE})
    completed = run_cli("run", str(sequence), "--records", "rec", cwd=folder)
    assert completed.returncode == 1, completed.stdout + completed.stderr  # TM150-0004 fails
    with sqlite3.connect(folder / "rec" / "results.sqlite") as db:
        (cal_id,), = db.execute("SELECT calibration_id FROM calibrations").fetchall()
    return folder / "rec", cal_id


def records_of(first_run: tuple[Path, str], tmp_path: Path) -> Path:
    shutil.copytree(first_run[0], tmp_path / "rec")
    return tmp_path / "rec"


def last_run(records: Path) -> tuple[str, dict[str, object]]:
    with sqlite3.connect(records / "results.sqlite") as db:
        db.row_factory = sqlite3.Row
        row = dict(db.execute("SELECT * FROM runs ORDER BY rowid DESC LIMIT 1").fetchone())
    return str(row["run_id"]), row


def held_by_truth(records: Path, run_id: str) -> dict[str, tuple[float, float]]:
    """Per device: the share of points whose recorded |Γ| lies within its recorded U of the true
    as-terminated |Γ|, and the largest |error| / U."""
    with sqlite3.connect(records / "results.sqlite") as db:
        rows = db.execute("SELECT serial, touchstone, uncertainty FROM devices WHERE run_id = ?", (run_id,)).fetchall()
    found = {}
    with SimulatedBench(SCENARIO) as bench, BenchControlClient(bench.control_address) as control:
        for serial, touchstone, packed in rows:
            network = skrf.Network(str(records / touchstone))
            control.connect(1, serial, "good-termination")
            truth = control.truth(1, start_hz=network.f[0], stop_hz=network.f[-1], points=network.f.size)
            ratio = np.abs(np.abs(network.s[:, 0, 0]) - np.abs(truth)) / unpack_arrays(packed)["expanded_uncertainty"]
            found[serial] = (float(np.mean(ratio <= 1)), float(ratio.max()))
    return found


def check_against_truth(found: dict[str, tuple[float, float]]) -> None:
    # One bench is one draw of actual standards, shared by every point (see
    # tests/e2e/test_two_port_runs.py): 95 % of points within U, none beyond 1.5 U.
    for serial, (inside, worst) in found.items():
        assert inside >= 0.95 and worst <= 1.5, (serial, inside, worst)


def test_a_later_run_reuses_the_calibration_and_reads_the_truth(first_run: tuple[Path, str], tmp_path: Path,
                                                                sequence_variant: Callable[..., Path]) -> None:
    records, cal_id = records_of(first_run, tmp_path), first_run[1]
    completed = run_cli("run", str(sequence_variant("batch.toml", {**FOUR, **DENSE, **REUSE})), "--records", "rec",
                        cwd=tmp_path)
    assert completed.returncode == 1, completed.stdout + completed.stderr
    assert f"calibration reused: {cal_id}, made in run" in completed.stdout and "on this sweep's grid" in completed.stdout
    assert "calibrated: one-port" not in completed.stdout  # no standard was measured
    run_id, run = last_run(records)
    assert run["calibration_id"] == cal_id and run["status"] == "complete"
    journal = [json.loads(line) for line in (records / "runs" / run_id / "journal.jsonl").read_text().splitlines()]
    (calibrated,) = [event for event in journal if event["event"] == "calibrated"]
    assert calibrated["reused"] is True and calibrated["interpolation_error"] is None
    with sqlite3.connect(records / "results.sqlite") as db:
        checks = db.execute("SELECT devices_before, passed FROM verifications WHERE run_id = ?", (run_id,)).fetchall()
        qualified = db.execute("SELECT COUNT(*) FROM qualifications WHERE run_id = ?", (run_id,)).fetchone()
        calibrations = db.execute("SELECT COUNT(*) FROM calibrations").fetchone()
    assert checks == [(0, 1), (4, 1)] and qualified == (1,) and calibrations == (1,)  # the steps ran; no new one
    metadata = check_records_agree(records, run_id)
    for keys in metadata.values():
        assert keys["calibration.id"] == cal_id and keys["calibration.reused"].startswith(f"yes: {cal_id}, made in run")
        assert keys["calibration.interpolation_error"] == "none: on the sweep's own grid"
    check_against_truth(held_by_truth(records, run_id))


def test_reuse_interpolates_within_its_tolerance_only_and_says_so(first_run: tuple[Path, str], tmp_path: Path,
                                                                  sequence_variant: Callable[..., Path]) -> None:
    records = records_of(first_run, tmp_path)
    fewer = {"points = 201": "points = 401"}
    # The estimate for these terms (connector draws scatter them from point to point) exceeds
    # the default 1e-3: refused, and the message says which key would allow it.
    refused = run_cli("run", str(sequence_variant("batch.toml", {**FOUR, **fewer, **REUSE})), "--records", "rec",
                      cwd=tmp_path)
    assert refused.returncode == 2
    assert "would add an estimated error of 0.00" in refused.stderr and "above the tolerance 0.001" in refused.stderr
    assert "(max_interpolation_error; raise it only if an error that large is acceptable)" in refused.stderr
    allowed = {"valid_for_minutes = 60": 'valid_for_minutes = 60\nreuse = "latest"\nmax_interpolation_error = 5e-3'}
    completed = run_cli("run", str(sequence_variant("batch.toml", {**FOUR, **fewer, **allowed})), "--records", "rec",
                        cwd=tmp_path)
    assert completed.returncode == 1, completed.stdout + completed.stderr
    assert "interpolated onto this sweep (estimated error 0.00" in completed.stdout
    run_id, _ = last_run(records)
    for keys in check_records_agree(records, run_id).values():
        error = float(keys["calibration.interpolation_error"].split()[0])
        assert 1e-3 < error < 5e-3 and keys["calibration.reused"].startswith("yes:")
        assert keys["sweep.points"] == "401"
    with sqlite3.connect(records / "results.sqlite") as db:
        kept = {(serial, run): unpack_arrays(packed)["expanded_uncertainty"] for serial, run, packed in db.execute(
            "SELECT serial, run_id, uncertainty FROM devices")}
    # The estimate is in every point's uncertainty, beside what the first run's had (at the
    # frequencies both swept): a bound of unknown phase, u = e/√2, with k >= 1.41.
    for (serial, run), u in kept.items():
        if run == run_id:
            first = next(v for (s, r), v in kept.items() if s == serial and r != run_id)[::2]
            assert np.sqrt(np.maximum(u**2 - first**2, 0)).min() >= 0.999 * error, serial
    check_against_truth(held_by_truth(records, run_id))


def test_reuse_refuses_another_analyzer_an_old_calibration_and_a_sweep_beyond_it(
        first_run: tuple[Path, str], tmp_path: Path, sequence_variant: Callable[..., Path]) -> None:
    records, cal_id = records_of(first_run, tmp_path), first_run[1]
    other = {"SIM0042": "SIM0043"}  # the same bench with another analyzer serial
    cases = [
        ({"valid_for_minutes = 60": f'valid_for_minutes = 60\nreuse = "{cal_id}"'}, other,
         f"calibration {cal_id} was made on Tarnmoor Instruments SIM-R1 reflectometer (simulated) s/n SIM0042 fw 1.0, "
         "not on Tarnmoor Instruments SIM-R1 reflectometer (simulated) s/n SIM0043 fw 1.0"),
        (REUSE, other, "hold no one-port (open, short, load) calibration of Tarnmoor Instruments SIM-R1 reflectometer "
         f"(simulated) s/n SIM0043 fw 1.0 at station 'batch test bench (simulated)'; the latest at this station, "
         f"{cal_id}, is"),
        ({"valid_for_minutes = 60": 'valid_for_minutes = 0.001\nreuse = "latest"'}, None,
         f"calibration {cal_id} no longer holds: it is"),
        ({**REUSE, "stop_hz = 500e6": "stop_hz = 600e6"}, None,
         f"the sweep (100-600 MHz) falls outside calibration {cal_id} (100-500 MHz)"),
    ]
    for replace, bench, why in cases:
        sequence = sequence_variant("batch.toml", {**FOUR, **DENSE, **replace}, bench_replace=bench)
        completed = run_cli("run", str(sequence), "--records", "rec", cwd=tmp_path)
        assert completed.returncode == 2, completed.stdout + completed.stderr
        message = completed.stderr.split("run did not complete (halted): ", 1)[1]
        assert why in message, message
        line = sequence.read_text(encoding="utf-8").splitlines().index(next(
            text for text in sequence.read_text(encoding="utf-8").splitlines() if text.startswith("reuse = "))) + 1
        assert message.rstrip().endswith(f"Fix: remove reuse from [calibration] ({sequence}:{line}) and run again: "
                                         "the calibrate step then measures the kit's standards"), message
        # A resume would load the same stored calibration and be refused again: the Fix is the way on.
        assert "To continue" not in completed.stdout and "--resume" not in completed.stdout + completed.stderr, \
            completed.stdout
        assert f"run {last_run(records)[0]} halted" in completed.stdout, completed.stdout
        run_id, run = last_run(records)
        with sqlite3.connect(records / "results.sqlite") as db:
            devices = db.execute("SELECT COUNT(*) FROM devices WHERE run_id = ?", (run_id,)).fetchone()
        assert run["status"] == "halted" and devices == (0,)


def test_reuse_refuses_a_calibration_whose_last_check_failed_or_warned(
        first_run: tuple[Path, str], tmp_path: Path, sequence_variant: Callable[..., Path]) -> None:
    # A check that failed, or that found the check standard out of statistical control (a
    # warning), ends the calibration's validity (harness/run_checks.py): no later run takes it.
    records, cal_id = records_of(first_run, tmp_path), first_run[1]
    for column, value, why in (("passed", 0, "failed"), ("in_control", 0, "out of statistical control")):
        with sqlite3.connect(records / "results.sqlite") as db:
            db.execute("UPDATE verifications SET passed = 1, in_control = 1")
            db.execute(f"UPDATE verifications SET {column} = ? WHERE verification_id ="
                       " (SELECT MAX(verification_id) FROM verifications WHERE calibration_id = ?)", (value, cal_id))
        sequence = sequence_variant("batch.toml", {**FOUR, **DENSE, **REUSE})
        completed = run_cli("run", str(sequence), "--records", "rec", cwd=tmp_path)
        assert completed.returncode == 2, completed.stdout + completed.stderr
        message = completed.stderr.split("run did not complete (halted): ", 1)[1]
        assert f"the last check of calibration {cal_id}" in message and why in message, message


def test_a_run_that_reused_an_interpolated_calibration_resumes_with_it(
        first_run: tuple[Path, str], tmp_path: Path, sequence_variant: Callable[..., Path]) -> None:
    import signal
    import subprocess
    import sys
    import time

    records, cal_id = records_of(first_run, tmp_path), first_run[1]
    allowed = {"valid_for_minutes = 60": 'valid_for_minutes = 60\nreuse = "latest"\nmax_interpolation_error = 5e-3',
               "points = 201": "points = 401"}
    sequence = sequence_variant("batch.toml", allowed, time_scale=1.0)  # the whole batch: slow enough to stop
    before = {folder.name for folder in (records / "runs").iterdir()}
    process = subprocess.Popen([sys.executable, "-m", "lineproof.cli", "run", str(sequence), "--records", "rec"],
                               cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60

    def committed() -> int:
        new = [folder / "journal.jsonl" for folder in (records / "runs").iterdir() if folder.name not in before]
        return sum(path.read_text().count('"device-committed"') for path in new if path.is_file())

    while committed() < 2:
        assert time.monotonic() < deadline and process.poll() is None, "the run did not get two devices in"
        time.sleep(0.01)
    process.send_signal(signal.SIGINT)
    _, stderr = process.communicate(timeout=60)
    assert process.returncode == 2 and "did not complete (interrupted)" in stderr, stderr
    run_id, _ = last_run(records)
    resumed = run_cli("run", "--resume", run_id, "--records", "rec", cwd=tmp_path)
    assert resumed.returncode == 1, resumed.stdout + resumed.stderr  # TM150-0004 fails
    assert "cannot be kept" not in resumed.stdout  # fitted to the sweep again, still valid: kept
    metadata = check_records_agree(records, run_id)
    assert len(metadata) == 10
    for keys in metadata.values():
        assert keys["calibration.id"] == cal_id and keys["calibration.reused"].startswith(f"yes: {cal_id}")
        assert 1e-3 < float(keys["calibration.interpolation_error"].split()[0]) < 5e-3
    with sqlite3.connect(records / "results.sqlite") as db:
        assert db.execute("SELECT COUNT(*) FROM calibrations").fetchone() == (1,)
