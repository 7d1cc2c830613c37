"""`lineproof run` on the simulated bench, as a user runs it: records that agree with each other,
with scikit-rf and with the bench's hidden truth; JSON for line systems; clear refusals."""

from __future__ import annotations

import hashlib
import json
import sqlite3
from pathlib import Path

import numpy as np
import pytest
import skrf
from record_checks import check_records_agree, device_rows, run_cli, steps_in_pairs

from lineproof.cli import main
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient

SCENARIO = Path(__file__).parent.parent / "scenarios" / "batch-bench.toml"


def run_id_of(records: Path) -> str:
    with sqlite3.connect(records / "results.sqlite") as db:
        return db.execute("SELECT run_id FROM runs ORDER BY rowid DESC LIMIT 1").fetchone()[0]


def test_a_batch_is_recorded_completely_and_matches_the_truth(tmp_path: Path, sequence_variant) -> None:
    sequence = sequence_variant()
    completed = run_cli("run", str(sequence), "--records", "rec", "--operator", "Jürgen Prüfer", cwd=tmp_path)
    # TM150-0004 of the scenario has a 44-ohm through-line and fails: exit code 1.
    assert completed.returncode == 1, completed.stderr
    records = tmp_path / "rec"
    run_id = run_id_of(records)
    metadata = check_records_agree(records, run_id)
    assert len(metadata) == 10
    assert {s: m["verdict"] for s, m in metadata.items() if m["verdict"] != "pass"} == {"TM150-0004": "fail"}
    assert metadata["TM150-0001"]["operator"] == "Jürgen Prüfer"
    assert metadata["TM150-0001"]["sequence.sha256"] == hashlib.sha256(sequence.read_bytes()).hexdigest()
    assert "TM150-0004" in completed.stdout and "FAIL" in completed.stdout

    with sqlite3.connect(records / "results.sqlite") as db:
        checks = db.execute("SELECT devices_before, passed FROM verifications ORDER BY verification_id").fetchall()
        check_bands = db.execute("SELECT measured_reflection FROM verification_bands").fetchall()
        status = db.execute("SELECT status FROM runs WHERE run_id = ?", (run_id,)).fetchone()
    # A check right after calibrating, after devices 4 and 8, and at the end (reverify in batch.toml).
    assert checks == [(0, 1), (4, 1), (8, 1), (10, 1)]
    # The check standard is a 75-ohm resistor: |Γ| = (75 - 50) / (75 + 50) = 0.2 (definition of
    # the reflection coefficient); the run's own figure must agree within the calibration's residual
    # directivity, which is the actual load's reflection: 40-45 dB return loss here, |Γ| <= 0.01.
    assert all(abs(m - 0.2) < 0.012 for (m,) in check_bands)
    assert status == ("complete",)
    assert sorted(p.name for p in (records / "runs" / run_id).iterdir() if not p.suffix == ".s1p") == [
        "journal.jsonl", "sequence.toml"]  # no empty run.lock left in a finished run's folder

    # Against the hidden truth: a device's recorded reflection is its true as-terminated input
    # reflection within the same residual (plus the scenario's connector repeatability, 0.0005).
    with SimulatedBench(SCENARIO) as bench, BenchControlClient(bench.control_address) as control:
        for serial in ("TM150-0001", "TM150-0004"):
            network = skrf.Network(str(records / "runs" / run_id / f"{serial}.s1p"))
            control.connect(1, serial, "good-termination")
            truth = control.truth(1, start_hz=1e8, stop_hz=5e8, points=201)
            assert np.max(np.abs(np.abs(network.s[:, 0, 0]) - np.abs(truth))) < 0.012


def test_json_lines_for_a_line_system(tmp_path: Path, sequence_variant) -> None:
    sequence = sequence_variant(replace={'"TM150-0004", ': "", '"TM150-0006", "TM150-0007", "TM150-0008", '
                                         '"TM150-0009", "TM150-0010"': ""})
    completed = run_cli("run", str(sequence), "--records", "rec", "--json", cwd=tmp_path)
    assert completed.returncode == 0, completed.stderr
    events = [json.loads(line) for line in completed.stdout.splitlines()]
    kinds = [e["event"] for e in events]
    assert kinds[0] == "run-started" and kinds[-1] == "run-finished"
    devices = [e for e in events if e["event"] == "device"]
    assert [d["serial"] for d in devices] == ["TM150-0001", "TM150-0002", "TM150-0003", "TM150-0005"]
    assert all(d["verdict"] == "pass" and {b["band"] for b in d["bands"]} == {"2m", "70cm"} for d in devices)
    finished = events[-1]
    assert finished["status"] == "complete" and finished["exit_code"] == 0 and finished["counts"]["pass"] == 4


def test_invalid_input_is_refused_before_anything_is_touched(tmp_path: Path, sequence_variant) -> None:
    sequence = sequence_variant(replace={"points = 201": "points = 201\nspeed = 3", '"TM150-0010"': '"../../x"'})
    completed = run_cli("run", str(sequence), "--records", "rec", cwd=tmp_path)
    assert completed.returncode == 3
    line = sequence.read_text().splitlines().index("speed = 3") + 1
    assert f"{sequence}:{line} [sweep.speed]: unknown key" in completed.stderr
    assert "'../../x' is not allowed" in completed.stderr
    assert not (tmp_path / "rec").exists()
    as_json = run_cli("check", str(sequence), "--json", cwd=tmp_path)
    assert as_json.returncode == 3
    problems = json.loads(as_json.stdout)["problems"]
    assert {p["key"] for p in problems} == {"sweep.speed", "devices.serials[10]"}
    assert all(p["line"] and p["fix"] for p in problems)


def test_a_database_that_is_not_ours_loses_nothing(tmp_path: Path, sequence_variant) -> None:
    records = tmp_path / "rec"
    records.mkdir()
    foreign = records / "results.sqlite"
    with sqlite3.connect(foreign) as db:
        db.execute("CREATE TABLE stock (part TEXT)")
    before = foreign.read_bytes()
    completed = run_cli("run", str(sequence_variant()), "--records", "rec", cwd=tmp_path)
    assert completed.returncode == 3 and "not one lineproof created" in completed.stderr
    assert foreign.read_bytes() == before and sorted(p.name for p in records.iterdir()) == ["results.sqlite"]
    (tmp_path / "notes").write_text("a file, not a folder")
    misplaced = run_cli("run", str(sequence_variant()), "--records", "notes", cwd=tmp_path)
    assert misplaced.returncode == 3 and "the records folder is a file" in misplaced.stderr


def test_resume_refuses_what_it_cannot_continue(tmp_path: Path, sequence_variant,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    sequence = sequence_variant(replace={'"TM150-0006", "TM150-0007", "TM150-0008", "TM150-0009", "TM150-0010"': ""})
    assert run_cli("run", str(sequence), "--records", "rec", cwd=tmp_path).returncode == 1
    run_id = run_id_of(tmp_path / "rec")
    records = str(tmp_path / "rec")
    for bad, message in (("../../x", "is not a run id"), ("run-20260101T000000Z-000000", "no run"),
                         (run_id, "nothing to resume")):
        assert main(["run", "--resume", bad, "--records", records]) == 3
        assert message in capsys.readouterr().err
    assert len(device_rows(tmp_path / "rec" / "results.sqlite")) == 5


def test_a_station_file_replaces_the_sequences_station(tmp_path: Path, sequence_variant) -> None:
    sequence = sequence_variant(replace={'"TM150-0004", "TM150-0005",': "", '"TM150-0006", "TM150-0007", "TM150-0008", '
                                         '"TM150-0009", "TM150-0010"': ""})
    stations = tmp_path / "stations"
    stations.mkdir()
    (stations / "bench.toml").write_text(SCENARIO.read_text(encoding="utf-8"), encoding="utf-8")
    station = stations / "bench-b.toml"
    station.write_text('name = "bench B (simulated)"\nsimulated_bench = "bench.toml"\n'  # beside the station file
                       'connected_by = "simulated-operator"\nreference_plane = "bench B, port 1 connector"\n\n'
                       '[analyzer]\nprofile = "generic-scpi-reflectometer"\n', encoding="utf-8")
    completed = run_cli("run", str(sequence), "--station", str(station), "--records", "rec", cwd=tmp_path)
    assert completed.returncode == 0, completed.stderr
    run_id = run_id_of(tmp_path / "rec")
    metadata = check_records_agree(tmp_path / "rec", run_id)
    assert {m["station"] for m in metadata.values()} == {"bench B (simulated)"}
    assert {m["reference_plane"] for m in metadata.values()} == {"bench B, port 1 connector"}
    assert (tmp_path / "rec" / "runs" / run_id / "station.toml").read_text(encoding="utf-8") == station.read_text()

    # A run that halts on this station resumes on it: the kept copy finds its bench beside the original.
    worn = sequence.read_text(encoding="utf-8").replace('name = "good-termination"', 'name = "poor-termination"')
    sequence.write_text(worn, encoding="utf-8")
    halted = run_cli("run", str(sequence), "--station", str(station), "--records", "rec", cwd=tmp_path)
    assert halted.returncode == 2 and "poor-termination failed qualification" in halted.stderr
    run_id = run_id_of(tmp_path / "rec")
    again = run_cli("run", "--resume", run_id, "--records", "rec", cwd=tmp_path)
    assert again.returncode == 2 and "poor-termination failed qualification" in again.stderr
    assert "bench B (simulated)" in again.stdout
    moved = run_cli("run", "--resume", run_id, "--records", "rec", "--station", str(station), cwd=tmp_path)
    assert moved.returncode == 3 and "--station cannot change the station" in moved.stderr

    station.write_text(station.read_text().replace('[analyzer]', 'colour = "red"\n\n[analyzer]'), encoding="utf-8")
    refused = run_cli("run", str(sequence), "--station", str(station), "--records", "rec", "--json", cwd=tmp_path)
    assert refused.returncode == 3
    error = json.loads(refused.stdout)
    assert error["event"] == "error" and error["kind"] == "invalid-input"
    assert error["ok"] is False and error["exit_code"] == 3  # the same object as every command's
    line = station.read_text().splitlines().index('colour = "red"') + 1
    assert error["problems"] == [{"file": str(station), "line": line, "key": "colour", "problem": "unknown key",
                                  "fix": error["problems"][0]["fix"]}]


def test_checks_fall_due_by_time_and_the_analyzer_is_identified_again(tmp_path: Path, sequence_variant) -> None:
    # Sweeps of about 30 ms (time scale 1) and a check due every 50 ms: several checks by time.
    sequence = sequence_variant(time_scale=1.0, replace={
        "every_devices = 4": "every_minutes = 0.00083",
        '[[step]]\ndo = "measure-batch"': '[[step]]\ndo = "measure-batch"\n\n[[step]]\ndo = "identify"'})
    completed = run_cli("run", str(sequence), "--records", "rec", "--json", cwd=tmp_path)
    assert completed.returncode == 1, completed.stderr
    events = [json.loads(line) for line in completed.stdout.splitlines()]
    checks = [e["devices_before"] for e in events if e["event"] == "verification"]
    assert checks[0] == 0 and checks[-1] == 10 and 4 <= len(checks) <= 11
    assert checks == sorted(set(checks))  # never two checks without a device between them
    assert any(e["event"] == "step-finished" and e["text"].startswith("identified: Tarnmoor Instruments")
               for e in events)
    assert ("identifying the analyzer", "step-finished") in {pair[:2] for pair in steps_in_pairs(events)}


def test_a_command_line_mistake_exits_3_from_the_installed_command(tmp_path: Path) -> None:
    # argparse alone would exit 2, which means "the run could not complete".
    completed = run_cli("run", "--bogus", "x", "--json", cwd=tmp_path)
    assert completed.returncode == 3
    assert json.loads(completed.stdout)["problems"][0]["key"] == "--bogus"
    assert "usage: lineproof run" in completed.stderr and not (tmp_path / "lineproof-records").exists()


def test_check_refuses_the_database_run_would_refuse_with_file_and_line(tmp_path: Path, sequence_variant) -> None:
    stranger = tmp_path / "passwd"
    stranger.write_text("root:x:0:0:root:/root:/bin/sh\n")
    for database, problem in (("postgresql://u@h/db", "PostgreSQL results databases are not supported"),
                              (str(stranger), "is not an SQLite database")):
        sequence = sequence_variant(replace={"[[step]]\ndo = \"calibrate\"":
                                             f'[records]\ndatabase = "{database}"\n\n[[step]]\ndo = "calibrate"'})
        line = sequence.read_text().splitlines().index(f'database = "{database}"') + 1
        where = f"{sequence}:{line} [records.database]: "
        checked = run_cli("check", str(sequence), cwd=tmp_path)
        assert checked.returncode == 3 and where in checked.stderr and problem in checked.stderr
        refused = run_cli("run", str(sequence), "--records", "rec", cwd=tmp_path)
        assert refused.returncode == 3 and where in refused.stderr and "<input>" not in refused.stderr
        assert not (tmp_path / "rec").exists()
    assert stranger.read_text() == "root:x:0:0:root:/root:/bin/sh\n"
