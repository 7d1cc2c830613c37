"""The results database: migration from schema 1, refusal of files that are not ours, round trips."""

from __future__ import annotations

import hashlib
import sqlite3
from pathlib import Path

import numpy as np
import pytest

from lineproof.errors import InputError
from lineproof.store import ResultStore, database_file_problem, open_store, url_problem
from lineproof.store_schema import SCHEMA_VERSION
from lineproof.values import CalibrationRecord, InstrumentIdentity, SweepPlan

# The schema lineproof 0.1 wrote (copied from that release's store.py), with one run and device.
SCHEMA_1_AS_RELEASED = """
CREATE TABLE IF NOT EXISTS lineproof_meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS runs (
    run_id TEXT PRIMARY KEY, started_utc TEXT NOT NULL, finished_utc TEXT, status TEXT NOT NULL,
    sequence_name TEXT NOT NULL, station TEXT NOT NULL, operator TEXT NOT NULL, software_version TEXT NOT NULL,
    analyzer TEXT NOT NULL, resource TEXT NOT NULL, sweep_plan TEXT NOT NULL, calibration_id TEXT,
    calibration_method TEXT, cal_kit TEXT, termination TEXT, termination_worst_vswr REAL,
    termination_limit_vswr REAL, termination_passed INTEGER);
CREATE TABLE IF NOT EXISTS devices (
    device_row INTEGER PRIMARY KEY, run_id TEXT NOT NULL REFERENCES runs(run_id), serial TEXT NOT NULL,
    model TEXT NOT NULL, measured_utc TEXT NOT NULL, verdict TEXT NOT NULL, touchstone TEXT NOT NULL,
    UNIQUE (run_id, serial));
CREATE TABLE IF NOT EXISTS band_results (
    device_row INTEGER NOT NULL REFERENCES devices(device_row), band TEXT NOT NULL, start_hz REAL NOT NULL,
    stop_hz REAL NOT NULL, limit_vswr REAL NOT NULL, worst_vswr REAL NOT NULL, worst_frequency_hz REAL NOT NULL,
    mean_vswr REAL NOT NULL, worst_return_loss_db REAL NOT NULL, expanded_uncertainty REAL,
    verdict TEXT NOT NULL, decision_rule TEXT NOT NULL, PRIMARY KEY (device_row, band));
INSERT INTO lineproof_meta VALUES ('application', 'lineproof'), ('schema_version', '1');
INSERT INTO runs (run_id, started_utc, status, sequence_name, station, operator, software_version, analyzer,
                  resource, sweep_plan)
    VALUES ('run-old', '2026-01-01T00:00:00+00:00', 'complete', 'built-in demo', 'bench', 'op', '0.1.0',
            'SIM-R1', 'TCPIP::127.0.0.1::5025::SOCKET', '100-500 MHz');
INSERT INTO devices VALUES (1, 'run-old', 'TM150-0001', 'TM-150', '2026-01-01T00:00:01+00:00', 'pass',
                            'runs/run-old/TM150-0001.s1p');
INSERT INTO band_results VALUES (1, '2m', 144e6, 148e6, 1.1, 1.01, 148e6, 1.005, 46.0, NULL, 'pass', 'simple');
"""


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_a_schema_1_database_is_migrated_keeping_every_record_and_a_copy(tmp_path: Path) -> None:
    path = tmp_path / "results.sqlite"
    with sqlite3.connect(path) as db:
        db.executescript(SCHEMA_1_AS_RELEASED)
    before = digest(path)
    with ResultStore(path) as store:
        assert store.schema_version == SCHEMA_VERSION
        assert store.query("SELECT serial, verdict, touchstone FROM devices") == [
            ("TM150-0001", "pass", "runs/run-old/TM150-0001.s1p")]
        assert store.query("SELECT band, worst_vswr FROM band_results") == [("2m", 1.01)]
        assert store.run("run-old")["status"] == "complete"
        assert store.rows("SELECT suspect FROM devices")[0]["suspect"] == 0
    backup = tmp_path / "results.sqlite.schema1-backup"
    assert backup.is_file()
    with sqlite3.connect(backup) as db:
        assert db.execute("SELECT value FROM lineproof_meta WHERE key = 'schema_version'").fetchone() == ("1",)
    assert digest(path) != before


def test_a_database_that_is_not_ours_is_refused_and_left_untouched(tmp_path: Path) -> None:
    foreign = tmp_path / "inventory.sqlite"
    with sqlite3.connect(foreign) as db:
        db.execute("CREATE TABLE parts (name TEXT)")
        db.execute("INSERT INTO parts VALUES ('N connector')")
    text_file = tmp_path / "notes.sqlite"
    text_file.write_text("not a database at all\n" * 50)
    for path in (foreign, text_file):
        before = digest(path)
        with pytest.raises(InputError) as caught:
            ResultStore(path)
        assert str(path) in str(caught.value) and caught.value.fix
        assert digest(path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["inventory.sqlite", "notes.sqlite"]


def test_a_newer_schema_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "results.sqlite"
    ResultStore(path).close()
    with sqlite3.connect(path) as db:
        db.execute("UPDATE lineproof_meta SET value = '99' WHERE key = 'schema_version'")
    with pytest.raises(InputError, match="newer"):
        ResultStore(path)


def test_a_database_url_this_version_cannot_use_is_refused_clearly(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="PostgreSQL"):
        open_store("postgresql://line-server/results")


def test_a_calibration_round_trips_through_the_database(tmp_path: Path) -> None:
    f = np.linspace(1e8, 5e8, 11)
    rng = np.random.default_rng(5)
    terms = {name: rng.normal(size=11) + 1j * rng.normal(size=11)
             for name in ("directivity", "source_match", "reflection_tracking")}
    cal = CalibrationRecord("cal-1", "one-port (open, short, load)", "N50 illustrative", "ab" * 32,
                            "2026-01-01T00:00:00+00:00", InstrumentIdentity("Maker", "M1", "S1", "2.0", "TCPIP::x"),
                            SweepPlan(1e8, 5e8, 11, 1000.0), 50.0, f, terms)
    with ResultStore(tmp_path / "r.sqlite") as store:
        store.start_run({"run_id": "run-1", "started_utc": "x", "status": "running", "sequence_name": "s",
                         "station": "st", "operator": "op", "software_version": "v", "analyzer": "a",
                         "resource": "r", "sweep_plan": "p"})
        store.save_calibration("run-1", cal, "st")
        back = store.load_calibration("cal-1")
    assert back is not None and back.instrument == cal.instrument and back.plan == cal.plan
    assert np.array_equal(back.frequencies_hz, f)
    for name, value in terms.items():
        assert np.array_equal(back.terms[name], value)


def test_schema_3_band_results_are_kept_and_a_transmission_only_band_fits_after(tmp_path: Path) -> None:
    from lineproof.store_schema import MIGRATION_2, MIGRATION_3, SCHEMA_1, SQLITE
    from lineproof.values import BandLimit, BandResult, DeviceIdentity, DeviceResult, FigureResult, Verdict

    path = tmp_path / "results.sqlite"
    with sqlite3.connect(path) as db:  # a database as schema 3 left it, with one device and band
        for statement in (*SCHEMA_1, *MIGRATION_2, *MIGRATION_3):
            db.execute(SQLITE.render(statement))
        db.execute("INSERT INTO lineproof_meta VALUES ('application', 'lineproof'), ('schema_version', '3')")
        db.execute("INSERT INTO runs (run_id, started_utc, status, sequence_name, station, operator, software_version,"
                   " analyzer, resource, sweep_plan) VALUES ('run-3', 'x', 'complete', 's', 'st', 'op', 'v', 'a', 'r', 'p')")
        db.execute("INSERT INTO devices (device_row, run_id, serial, model, measured_utc, verdict, touchstone)"
                   " VALUES (1, 'run-3', 'A-1', 'm', 'x', 'pass', 'runs/run-3/A-1.s1p')")
        db.execute("INSERT INTO band_results VALUES (1, '2m', 144e6, 148e6, 1.1, 1.01, 148e6, 1.005, 46.0, 0.002,"
                   " 'pass', 'simple')")
    band = BandLimit("pass", 1e7, 1e8, float("inf"), max_insertion_loss_db=1.0)
    loss = FigureResult("insertion-loss", 0.15, 3.2e7, 0.05, 1.0, 0.83, 0.98, Verdict.PASS)
    result = DeviceResult(DeviceIdentity("B-1", "m"), (BandResult(band, None, 3.2e7, None, None, Verdict.PASS, "rule",
                                                                  figures=(loss,)),), "x")
    with ResultStore(path) as store:
        assert store.schema_version == SCHEMA_VERSION == 4
        assert store.query("SELECT band, worst_vswr, mean_vswr, expanded_uncertainty, figure FROM band_results") == [
            ("2m", 1.01, 1.005, 0.002, None)]
        row = store.record_device("run-3", result, "runs/run-3/B-1.s2p")
        assert store.query("SELECT worst_vswr, worst_frequency_hz, worst_return_loss_db, limit_vswr, figure, verdict"
                           " FROM band_results WHERE device_row = ?", (row,)) == [
            (None, 3.2e7, None, float("inf"), "insertion-loss", "pass")]
    assert (tmp_path / "results.sqlite.schema3-backup").is_file()


def test_a_database_file_is_judged_read_only(tmp_path: Path) -> None:
    # What `lineproof check` says of a [records] database before a run would open it.
    ours = tmp_path / "ours.sqlite"
    ResultStore(ours).close()
    foreign = tmp_path / "inventory.sqlite"
    with sqlite3.connect(foreign) as db:
        db.execute("CREATE TABLE parts (name TEXT)")
    newer = tmp_path / "newer.sqlite"
    ResultStore(newer).close()
    with sqlite3.connect(newer) as db:
        db.execute("UPDATE lineproof_meta SET value = '99' WHERE key = 'schema_version'")
    text_file = tmp_path / "passwd"
    text_file.write_text("root:x:0:0:root:/root:/bin/sh\n")
    empty = tmp_path / "empty.sqlite"
    empty.touch()
    folder = tmp_path / "folder.sqlite"
    folder.mkdir()
    before = {p.name: (digest(p), p.stat().st_mtime_ns) for p in tmp_path.iterdir() if p.is_file()}
    found = {name: database_file_problem(tmp_path / name) for name in
             ("ours.sqlite", "absent.sqlite", "empty.sqlite", "inventory.sqlite", "newer.sqlite", "passwd",
              "folder.sqlite")}
    assert found["ours.sqlite"] is None and found["absent.sqlite"] is None and found["empty.sqlite"] is None
    assert "not one lineproof created" in found["inventory.sqlite"][0]
    assert "schema 99 is newer" in found["newer.sqlite"][0]
    assert "not an SQLite database" in found["passwd"][0]
    assert "not a file" in found["folder.sqlite"][0]
    assert all(problem is None or problem[1] for problem in found.values())  # each with its fix
    # Nothing written, nothing created beside them (no journal, no new database).
    assert {p.name: (digest(p), p.stat().st_mtime_ns) for p in tmp_path.iterdir() if p.is_file()} == before


def test_database_urls_are_judged_without_connecting() -> None:
    assert "PostgreSQL" in url_problem("postgresql://u@h/db")[0]
    assert "PostgreSQL" in url_problem("postgres://u@h/db")[0]
    assert "unknown database URL scheme" in url_problem("mysql://u@h/db")[0]
    assert url_problem("results.sqlite") is None and url_problem("/var/lib/lineproof/results.sqlite") is None
