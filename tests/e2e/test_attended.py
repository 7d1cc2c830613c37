"""An attended run: a person answers each prompt and enters or scans each serial number.  On a
simulated bench the bench's control channel makes each connection the person confirms."""

from __future__ import annotations

import sqlite3
from pathlib import Path

from record_checks import check_records_agree, run_cli

ATTENDED = {'connected_by = "simulated-operator"': 'connected_by = "operator"',
            "every_devices = 4\n": ""}


def scanned(sequence_variant) -> Path:  # noqa: ANN001
    listed = ('serials = ["TM150-0001", "TM150-0002", "TM150-0003", "TM150-0004", "TM150-0005",\n'
              '           "TM150-0006", "TM150-0007", "TM150-0008", "TM150-0009", "TM150-0010"]')
    return sequence_variant(replace={**ATTENDED, listed: 'entry = "scanned"\nmax_count = 5'})


def test_serials_are_entered_checked_and_refused_clearly(tmp_path: Path, sequence_variant) -> None:
    answers = ["", "", "", "",  # open, short and load; the termination alone
               "",  # the check standard
               "TM150-0002", "../../x", "tm150-0002", "Q" * 300, "TM150-0005",  # scanned serials
               "",  # an empty line ends the batch
               ""]  # the check standard again, at the end
    completed = run_cli("run", str(scanned(sequence_variant)), "--records", "rec", "--operator", "A. Tester",
                        cwd=tmp_path, stdin="\n".join(answers) + "\n")
    assert completed.returncode == 0, completed.stdout + completed.stderr
    out = completed.stdout
    assert out.count("Connect the open standard") == 1 and "Connect the check standard check-75" in out
    assert "'../../x' is not allowed" in out
    assert "tm150-0002 is already measured in this run" in out  # serials compare ignoring case
    assert "(300 characters)" in out
    with sqlite3.connect(tmp_path / "rec" / "results.sqlite") as db:
        run_id, = db.execute("SELECT run_id FROM runs").fetchone()
        checks = db.execute("SELECT devices_before FROM verifications").fetchall()
    metadata = check_records_agree(tmp_path / "rec", run_id)
    assert sorted(metadata) == ["TM150-0002", "TM150-0005"]
    assert metadata["TM150-0002"]["operator"] == "A. Tester"
    assert checks == [(0,), (2,)]


def test_input_that_ends_stops_the_run_resumably(tmp_path: Path, sequence_variant) -> None:
    sequence = scanned(sequence_variant)
    first = run_cli("run", str(sequence), "--records", "rec", cwd=tmp_path, stdin="\n" * 5 + "TM150-0001\n")
    assert first.returncode == 2 and "(interrupted): input ended (stdin closed)" in first.stderr
    assert "To continue: lineproof run --resume" in first.stdout and "Traceback" not in first.stderr
    with sqlite3.connect(tmp_path / "rec" / "results.sqlite") as db:
        run_id, = db.execute("SELECT run_id FROM runs").fetchone()
    assert sorted(check_records_agree(tmp_path / "rec", run_id)) == ["TM150-0001"]
    # Resumed: the calibration is still valid and kept, so the first prompt asks for a device.
    second = run_cli("run", "--resume", run_id, "--records", "rec", cwd=tmp_path,
                     stdin="TM150-0001\nstop\n")
    assert second.returncode == 2 and "(interrupted): stopped at the operator's request" in second.stderr
    assert "TM150-0001 is already measured in this run" in second.stdout
    assert "Connect the open standard" not in second.stdout


def test_a_batch_that_records_no_device_is_not_all_passed(tmp_path: Path, sequence_variant) -> None:
    sequence = scanned(sequence_variant)
    first = run_cli("run", str(sequence), "--records", "rec", cwd=tmp_path, stdin="\n" * 5)  # input ends at the batch
    assert first.returncode == 2 and "input ended (stdin closed)" in first.stderr
    with sqlite3.connect(tmp_path / "rec" / "results.sqlite") as db:
        run_id, = db.execute("SELECT run_id FROM runs").fetchone()
    # Resumed, and the batch ended at once: every step finished, but no device was measured.
    empty = run_cli("run", "--resume", run_id, "--records", "rec", cwd=tmp_path, stdin="\n")
    assert empty.returncode == 2, empty.stdout + empty.stderr
    assert "(halted): no device measured: the batch ended before any device was recorded" in empty.stderr
    assert "To continue: lineproof run --resume" in empty.stdout
    with sqlite3.connect(tmp_path / "rec" / "results.sqlite") as db:
        assert db.execute("SELECT status FROM runs").fetchone() == ("halted",)
    # It stays resumable: a device measured, it completes and passes.
    measured = run_cli("run", "--resume", run_id, "--records", "rec", cwd=tmp_path, stdin="TM150-0002\n\n\n")
    assert measured.returncode == 0, measured.stdout + measured.stderr
    assert sorted(check_records_agree(tmp_path / "rec", run_id)) == ["TM150-0002"]
