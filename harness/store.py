"""The results database: an embedded SQLite file by default.

Plain SQL through the DB-API, one table per record kind, so that the same schema can be
created on PostgreSQL for a line of several stations.  A database that lineproof did not
create is refused, never written to.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

from lineproof.errors import InputError
from lineproof.values import DeviceResult, TerminationQualification

APPLICATION = "lineproof"
SCHEMA_VERSION = 1

_SCHEMA = """
CREATE TABLE IF NOT EXISTS lineproof_meta (
    key   TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS runs (
    run_id            TEXT PRIMARY KEY,
    started_utc       TEXT NOT NULL,
    finished_utc      TEXT,
    status            TEXT NOT NULL,
    sequence_name     TEXT NOT NULL,
    station           TEXT NOT NULL,
    operator          TEXT NOT NULL,
    software_version  TEXT NOT NULL,
    analyzer          TEXT NOT NULL,
    resource          TEXT NOT NULL,
    sweep_plan        TEXT NOT NULL,
    calibration_id    TEXT,
    calibration_method TEXT,
    cal_kit           TEXT,
    termination       TEXT,
    termination_worst_vswr REAL,
    termination_limit_vswr REAL,
    termination_passed INTEGER
);
CREATE TABLE IF NOT EXISTS devices (
    device_row    INTEGER PRIMARY KEY,
    run_id        TEXT NOT NULL REFERENCES runs(run_id),
    serial        TEXT NOT NULL,
    model         TEXT NOT NULL,
    measured_utc  TEXT NOT NULL,
    verdict       TEXT NOT NULL,
    touchstone    TEXT NOT NULL,  -- relative to the database's folder
    UNIQUE (run_id, serial)
);
CREATE TABLE IF NOT EXISTS band_results (
    device_row          INTEGER NOT NULL REFERENCES devices(device_row),
    band                TEXT NOT NULL,
    start_hz            REAL NOT NULL,
    stop_hz             REAL NOT NULL,
    limit_vswr          REAL NOT NULL,
    worst_vswr          REAL NOT NULL,
    worst_frequency_hz  REAL NOT NULL,
    mean_vswr           REAL NOT NULL,
    worst_return_loss_db REAL NOT NULL,
    expanded_uncertainty REAL,
    verdict             TEXT NOT NULL,
    decision_rule       TEXT NOT NULL,
    PRIMARY KEY (device_row, band)
);
"""


class ResultStore:
    """Records of runs and devices in one SQLite file."""

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        existed = self.path.exists() and self.path.stat().st_size > 0
        self.path.parent.mkdir(parents=True, exist_ok=True)
        try:
            self._db = sqlite3.connect(self.path)
            self._db.execute("PRAGMA foreign_keys = ON")
            if existed:
                self._check_ours()
            else:
                self._create()
        except sqlite3.DatabaseError as exc:
            raise InputError(f"not a lineproof results database ({exc})", path=str(self.path),
                             fix="give a new file name or the database lineproof created") from exc

    def _check_ours(self) -> None:
        tables = {row[0] for row in self._db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        if "lineproof_meta" not in tables:
            self._db.close()
            raise InputError("this file is a database, but not one lineproof created; it was left untouched",
                             path=str(self.path), fix="give a new file name or the database lineproof created")
        meta = dict(self._db.execute("SELECT key, value FROM lineproof_meta"))
        if meta.get("application") != APPLICATION or int(meta.get("schema_version", "0")) > SCHEMA_VERSION:
            self._db.close()
            raise InputError(
                f"database schema {meta.get('schema_version')} is newer than this lineproof understands",
                path=str(self.path), fix="upgrade lineproof or use another database file",
            )

    def _create(self) -> None:
        with self._db:
            self._db.executescript(_SCHEMA)
            self._db.executemany(
                "INSERT OR REPLACE INTO lineproof_meta (key, value) VALUES (?, ?)",
                [("application", APPLICATION), ("schema_version", str(SCHEMA_VERSION))],
            )

    def start_run(self, run: dict[str, object]) -> None:
        columns = ", ".join(run)
        slots = ", ".join("?" for _ in run)
        with self._db:
            self._db.execute(f"INSERT INTO runs ({columns}) VALUES ({slots})", tuple(run.values()))

    def record_termination(self, run_id: str, qualification: TerminationQualification) -> None:
        with self._db:
            self._db.execute(
                "UPDATE runs SET termination = ?, termination_worst_vswr = ?, termination_limit_vswr = ?,"
                " termination_passed = ? WHERE run_id = ?",
                (qualification.name, qualification.worst_vswr, qualification.limit_vswr,
                 int(qualification.passed), run_id),
            )

    def record_calibration(self, run_id: str, calibration_id: str, method: str, kit: str) -> None:
        with self._db:
            self._db.execute(
                "UPDATE runs SET calibration_id = ?, calibration_method = ?, cal_kit = ? WHERE run_id = ?",
                (calibration_id, method, kit, run_id),
            )

    def record_device(self, run_id: str, result: DeviceResult, touchstone: str) -> int:
        """One row per device plus one per band, in one transaction."""
        with self._db:
            cursor = self._db.execute(
                "INSERT INTO devices (run_id, serial, model, measured_utc, verdict, touchstone)"
                " VALUES (?, ?, ?, ?, ?, ?)",
                (run_id, result.device.serial, result.device.model, result.measured_utc,
                 result.verdict.value, touchstone),
            )
            device_row = int(cursor.lastrowid)
            self._db.executemany(
                "INSERT INTO band_results VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                [
                    (device_row, b.limit.name, b.limit.start_hz, b.limit.stop_hz, b.limit.max_vswr,
                     b.worst_vswr, b.worst_frequency_hz, b.mean_vswr, b.worst_return_loss_db,
                     b.expanded_uncertainty, b.verdict.value, b.decision_rule)
                    for b in result.bands
                ],
            )
        return device_row

    def finish_run(self, run_id: str, status: str, finished_utc: str) -> None:
        with self._db:
            self._db.execute("UPDATE runs SET status = ?, finished_utc = ? WHERE run_id = ?",
                             (status, finished_utc, run_id))

    def query(self, sql: str, parameters: tuple[object, ...] = ()) -> list[tuple[object, ...]]:
        """Read-only helper for reports and tests."""
        return list(self._db.execute(sql, parameters))

    def close(self) -> None:
        self._db.close()
