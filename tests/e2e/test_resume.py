"""Interrupted runs: Ctrl-C between devices, and SIGKILL at random moments of a batch.  After
every interruption and resumption each committed device is recorded exactly once, no file is
half-written, and the database and the files agree."""

from __future__ import annotations

import json
import queue
import random
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from functools import partial
from pathlib import Path

import skrf
from record_checks import check_records_agree, device_rows, run_cli, steps_in_pairs

from lineproof.journal import read_journal
from lineproof.touchstone import read_metadata

ALL_SERIALS = [f"TM150-{n:04d}" for n in range(1, 11)]


def start(args: list[str], cwd: Path) -> subprocess.Popen[str]:
    return subprocess.Popen([sys.executable, "-m", "lineproof.cli", *args], cwd=cwd, stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE, text=True)


def wait_for(condition, timeout_s: float = 60.0, what: str = "") -> None:  # noqa: ANN001
    deadline = time.monotonic() + timeout_s
    while not condition():
        assert time.monotonic() < deadline, f"timed out waiting for {what}"
        time.sleep(0.005)


def journal_events(records: Path) -> list[dict]:
    journals = list((records / "runs").glob("*/journal.jsonl")) if (records / "runs").is_dir() else []
    return read_journal(journals[0]).events if journals else []


def test_ctrl_c_stops_between_devices_and_the_run_resumes(tmp_path: Path, sequence_variant) -> None:
    sequence = sequence_variant(time_scale=1.0)
    records = tmp_path / "rec"
    process = start(["run", str(sequence), "--records", str(records)], tmp_path)
    committed = lambda: sum(e["event"] == "device-committed" for e in journal_events(records))  # noqa: E731
    wait_for(lambda: committed() >= 2, what="two devices")
    process.send_signal(signal.SIGINT)
    _, stderr = process.communicate(timeout=60)
    assert process.returncode == 2, stderr
    assert "did not complete (interrupted)" in stderr
    run_id = next((records / "runs").iterdir()).name
    first = check_records_agree(records, run_id)
    assert 2 <= len(first) < 10
    with sqlite3.connect(records / "results.sqlite") as db:
        assert db.execute("SELECT status FROM runs").fetchone() == ("interrupted",)
    assert (records / "runs" / run_id / "run.lock").is_file()  # resumable: its lock stays

    resumed = run_cli("run", "--resume", run_id, "--records", str(records), cwd=tmp_path)
    assert resumed.returncode == 1, resumed.stderr  # TM150-0004 fails
    assert "already recorded; they will not be measured again" in resumed.stdout
    metadata = check_records_agree(records, run_id)
    assert sorted(metadata) == ALL_SERIALS
    assert all(metadata[s]["calibration.id"] == first[next(iter(first))]["calibration.id"] for s in metadata)
    with sqlite3.connect(records / "results.sqlite") as db:
        assert db.execute("SELECT COUNT(*) FROM calibrations").fetchone() == (1,)  # still valid: kept
        assert db.execute("SELECT status FROM runs").fetchone() == ("complete",)
    assert not (records / "runs" / run_id / "run.lock").exists()  # complete: no lock left behind


def progressed(records: Path, before: int, devices_wanted: int, process: subprocess.Popen[str]) -> bool:
    """The process has (re)started the run and committed ``devices_wanted`` devices, or ended."""
    new = journal_events(records)[before:]
    started = any(e["event"] in ("run-started", "resumed") for e in new)
    done = sum(e["event"] == "device-committed" for e in new) >= devices_wanted
    return (started and done) or process.poll() is not None


def check_at_rest(records: Path, run_id: str) -> None:
    """The records as a kill left them: committed devices once and whole; at most one result
    file not yet committed (whole as well: files appear only complete); temporaries allowed."""
    folder = records / "runs" / run_id
    rows = device_rows(records / "results.sqlite", run_id)
    serials = [r["serial"] for r in rows]
    assert len(serials) == len(set(serials)), serials
    committed = {Path(str(r["touchstone"])).name for r in rows}
    assert all((folder / name).is_file() for name in committed)
    extra = [p for p in folder.glob("*.s1p") if p.name not in committed]
    assert len(extra) <= 1, extra
    for path in folder.glob("*.s1p"):
        metadata = read_metadata(skrf.Network(str(path)).comments)
        assert metadata["device.serial"] == path.stem and metadata["verdict"] in ("pass", "fail")


def test_sigkill_at_random_moments_loses_and_repeats_nothing(tmp_path: Path, sequence_variant) -> None:
    # Twenty devices whose sweeps take about 60 ms: long enough for ten kills inside the batch.
    serials = [f"TM150-{n:04d}" for n in range(1, 21)]
    more = ", ".join(f'"{s}"' for s in serials[5:])
    tail = '"TM150-0006", "TM150-0007", "TM150-0008", "TM150-0009", "TM150-0010"]'
    sequence = sequence_variant(time_scale=2.0, bench_replace={"count = 10": "count = 20"}, replace={tail: f"{more}]"})
    records = tmp_path / "rec"
    chooser = random.Random(20261202)
    kills, attempts, run_id = 0, 0, None
    while kills < 10:
        attempts += 1
        assert attempts < 40, "the batch finished before ten kills"
        args = ["run", str(sequence)] if run_id is None else ["run", "--resume", run_id]
        before = len(journal_events(records))
        process = start([*args, "--records", str(records)], tmp_path)
        # A random moment: after the (re)start, or after the first or second device this process
        # commits, plus a random part of a sweep or two -- in a step, a sweep, a check or a commit.
        wait_for(partial(progressed, records, before, chooser.randint(0, 2), process), what="the run to make progress")
        time.sleep(chooser.uniform(0.0, 0.12))
        if process.poll() is None:
            process.kill()
            kills += 1
        process.communicate(timeout=60)
        run_id = run_id or next((records / "runs").iterdir()).name
        check_at_rest(records, run_id)
        with sqlite3.connect(records / "results.sqlite") as db:
            if db.execute("SELECT status FROM runs").fetchone() == ("complete",):
                raise AssertionError(f"the batch completed after {kills} kills; make it longer")
    final = run_cli("run", "--resume", run_id, "--records", str(records), cwd=tmp_path)
    assert final.returncode == 1, final.stderr
    metadata = check_records_agree(records, run_id)
    assert sorted(metadata) == serials
    assert sorted(int(m["device.position"]) for m in metadata.values()) == list(range(1, 21))
    events = read_journal(records / "runs" / run_id / "journal.jsonl")
    assert events.count("resumed") == kills
    print(json.dumps({"kills": kills, "attempts": attempts}))


def test_a_calibration_too_old_or_disproven_is_made_again_on_resume(tmp_path: Path, sequence_variant) -> None:
    sequence = sequence_variant(time_scale=1.0, replace={"valid_for_minutes = 60": "valid_for_minutes = 0.01"})
    records = tmp_path / "rec"
    process = start(["run", str(sequence), "--records", str(records)], tmp_path)
    wait_for(lambda: sum(e["event"] == "device-committed" for e in journal_events(records)) >= 2, what="two devices")
    process.send_signal(signal.SIGINT)
    process.communicate(timeout=60)
    time.sleep(0.7)  # the calibration is now older than its 0.6 s
    run_id = next((records / "runs").iterdir()).name
    resumed = run_cli("run", "--resume", run_id, "--records", str(records), cwd=tmp_path)
    assert resumed.returncode == 1, resumed.stderr
    assert "the calibration cannot be kept" in resumed.stdout and "old" in resumed.stdout
    metadata = check_records_agree(records, run_id)
    assert sorted(metadata) == ALL_SERIALS
    with sqlite3.connect(records / "results.sqlite") as db:
        calibrations = [c for (c,) in db.execute("SELECT calibration_id FROM calibrations ORDER BY created_utc")]
        used = dict(db.execute("SELECT serial, calibration_id FROM devices"))
    # The resumed run calibrates again at once; with a calibration valid for only 0.6 s the policy
    # (a calibration holds while it is younger than valid_for_minutes) makes it new again before
    # later devices too, in either session: no device was measured with an older one (the
    # records' times are whole seconds, hence at most 1 s).
    assert len(calibrations) >= 2 and set(used.values()) <= set(calibrations)
    assert used["TM150-0010"] == calibrations[-1]
    assert all(float(m["calibration.age_s"]) <= 1 for m in metadata.values())

    # A check standard that fails: the run halts, and a resumed run does not trust that calibration.
    strict = sequence_variant(replace={"tolerance = 0.015": "tolerance = 0.0001"})
    halted = run_cli("run", str(strict), "--records", "strict", cwd=tmp_path)
    assert halted.returncode == 2 and "failed verification after 0 device(s)" in halted.stderr
    strict_run = next((tmp_path / "strict" / "runs").iterdir()).name
    again = run_cli("run", "--resume", strict_run, "--records", "strict", cwd=tmp_path)
    assert again.returncode == 2 and "its last check-standard verification failed" in again.stdout
    assert not list((tmp_path / "strict" / "runs" / strict_run).glob("*.s1p"))


def run_with_ctrl_c(args: list[str], cwd: Path, when, timeout_s: float = 60.0) -> tuple[list[dict], int, str]:  # noqa: ANN001
    """``lineproof run --json``: its events, exit code and standard error; SIGINT is sent the
    moment ``when(events)`` first holds."""
    lines: queue.Queue[str | None] = queue.Queue()
    events: list[dict] = []
    signalled = False
    with (cwd / "stderr.txt").open("w+") as errors, subprocess.Popen(
            [sys.executable, "-m", "lineproof.cli", *args, "--json"], cwd=cwd, stdout=subprocess.PIPE, stderr=errors,
            text=True) as process:
        reader = threading.Thread(target=lambda: [lines.put(line) for line in process.stdout]  # type: ignore[union-attr]
                                  + [lines.put(None)])
        reader.start()
        deadline = time.monotonic() + timeout_s
        while (line := lines.get(timeout=max(0.1, deadline - time.monotonic()))) is not None:
            events.append(json.loads(line))
            if not signalled and when(events):
                process.send_signal(signal.SIGINT)
                signalled = True
        reader.join()
        process.wait(timeout=60)
        errors.seek(0)
        stderr = errors.read()
    assert signalled, "the moment to press Ctrl-C never came"
    return events, process.returncode, stderr


def in_the_final_check(events: list[dict]) -> bool:
    """The batch's last device is swept and the check after it has begun."""
    last_swept = [i for i, e in enumerate(events) if e.get("step") == "TM150-0010: connect and sweep"
                  and e["event"] == "step-finished"]
    return bool(last_swept) and events[-1]["event"] == "step-started" and events[-1]["step"].startswith("verifying")


def test_ctrl_c_in_the_final_check_completes_a_run_with_nothing_left_to_measure(tmp_path: Path,
                                                                                  sequence_variant) -> None:
    # The check standard connected ten times: a final check long enough for Ctrl-C to land in;
    # a route after the batch, which measures nothing.
    sequence = sequence_variant(time_scale=1.0, replace={
        "tolerance = 0.015": "tolerance = 0.015\nrepeats = 10",
        '[[step]]\ndo = "measure-batch"': '[[step]]\ndo = "measure-batch"\n\n[[step]]\ndo = "route"\nto = "good-termination"'})
    records = tmp_path / "rec"
    events, code, stderr = run_with_ctrl_c(["run", str(sequence), "--records", str(records)], tmp_path,
                                           in_the_final_check)
    assert code == 1, stderr  # complete; TM150-0004 fails
    notes = [e["text"] for e in events if e["event"] == "note"]
    assert any(n.startswith("Ctrl-C: stopping after the current device or step") for n in notes)  # it landed
    assert "Ctrl-C came when nothing was left to measure: the run is complete" in notes
    assert ("routing to good-termination", "step-finished", "routed to good-termination") in steps_in_pairs(events)
    assert events[-1]["status"] == "complete" and events[-1]["exit_code"] == 1 and "resume_command" not in events[-1]
    run_id = events[0]["run_id"]
    assert sorted(check_records_agree(records, run_id)) == ALL_SERIALS
    with sqlite3.connect(records / "results.sqlite") as db:
        assert db.execute("SELECT status FROM runs").fetchone() == ("complete",)
        assert db.execute("SELECT MAX(devices_before) FROM verifications").fetchone() == (10,)


def test_ctrl_c_before_a_step_that_measures_says_so_and_the_resume_only_does_that(tmp_path: Path,
                                                                                sequence_variant) -> None:
    sequence = sequence_variant(time_scale=1.0, replace={
        "tolerance = 0.015": "tolerance = 0.015\nrepeats = 10",
        '[[step]]\ndo = "measure-batch"': '[[step]]\ndo = "measure-batch"\n\n[[step]]\ndo = "verify"'})
    records = tmp_path / "rec"
    events, code, stderr = run_with_ctrl_c(["run", str(sequence), "--records", str(records)], tmp_path,
                                           in_the_final_check)
    assert code == 2, stderr
    finished = events[-1]
    assert finished["status"] == "interrupted" and finished["reason"] == (
        "stopped by Ctrl-C before step 5 (verify); every device of the batch is recorded; still to do: verify")
    steps_in_pairs(events)
    run_id = finished["run_id"]
    resumed = run_cli("run", "--resume", run_id, "--records", str(records), "--json", cwd=tmp_path)
    assert resumed.returncode == 1, resumed.stderr
    again = [json.loads(line) for line in resumed.stdout.splitlines()]
    pairs = steps_in_pairs(again)
    assert not any(e["event"] == "device" for e in again)  # nothing measured again
    assert pairs[0][0].startswith("keeping calibration cal-") and "kept: still valid" in pairs[0][2]
    # What is left is the verify step, and the check after the tenth device still holds for it.
    checks = [(e["devices_before"], e["reused"]) for e in again if e["event"] == "verification"]
    assert checks and all(check == (10, True) for check in checks)
    assert again[-1]["status"] == "complete"
    assert sorted(check_records_agree(records, run_id)) == ALL_SERIALS
