"""The results database: an embedded SQLite file by default.

Plain SQL through the DB-API, written once for the dialects of :mod:`lineproof.store_schema`,
so that the same records can live in PostgreSQL for a line of several stations.  A database
that lineproof did not create is refused, never written to; an older lineproof database is
migrated in one transaction after a copy of it is kept beside it.  Every record kind is
written in one transaction, so a run killed at any moment leaves whole records or none.
One store may be shared by the run's threads (calls are serialised by a lock).
"""

from __future__ import annotations

import io
import sqlite3
import threading
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from lineproof import calstore
from lineproof.errors import InputError
from lineproof.store_schema import APPLICATION, MIGRATIONS, SCHEMA_1, SCHEMA_VERSION, SQLITE, Dialect
from lineproof.values import (
    CalibrationRecord,
    DeviceResult,
    TerminationQualification,
    VerificationResult,
)


@dataclass(frozen=True)
class SuspectWindow:
    """The devices a failed check makes suspect: those of the run measured with
    ``calibration_id`` at positions after the last passing check, up to the failed one."""

    calibration_id: str
    after_position: int
    up_to_position: int
    reason: str


#: The records folder when neither --records nor the sequence names one, and the database's
#: file name in it.
DEFAULT_RECORDS = Path("lineproof-records")
DATABASE_NAME = "results.sqlite"
#: Where saved calibrations live, beside the database.
CALIBRATIONS_FOLDER = "calibrations"
_NOT_OURS_FIX = "give a new file name or a results database that lineproof created"


#: The first 16 bytes of every SQLite 3 database file (sqlite.org, "Database File Format" §1.3).
SQLITE_HEADER = b"SQLite format 3\x00"


def url_problem(location: str) -> tuple[str, str] | None:
    """(problem, fix) when ``location`` is a database URL this version cannot use, else None."""
    if location.startswith(("postgresql://", "postgres://")):
        return ("PostgreSQL results databases are not supported by this version of lineproof",
                'give an SQLite file for now, e.g. database = "results.sqlite" (the schema and queries are '
                "written for both)")
    if "://" in location:
        return f"unknown database URL scheme in {location[:60]!r}", "give a file path (SQLite)"
    return None


def database_file_problem(path: Path) -> tuple[str, str] | None:
    """(problem, fix) when ``path`` exists and cannot be the results database -- not a file,
    not SQLite, SQLite without lineproof's schema marker, a newer schema -- else None (absent,
    empty, or a lineproof database a run can use).  Only reads: the file is opened read-only,
    nothing is created beside it."""
    if not path.exists():
        return None
    if not path.is_file():
        return "the results database named here is not a file", _NOT_OURS_FIX
    try:
        with path.open("rb") as handle:
            header = handle.read(len(SQLITE_HEADER))
    except OSError as exc:
        return f"the results database cannot be read ({exc.strerror})", "give a file lineproof may read and write"
    if not header:
        return None  # an empty file: a run creates the database in it
    if header != SQLITE_HEADER:
        return ("this file exists and is not an SQLite database (a run would refuse it and leave it untouched)",
                _NOT_OURS_FIX)
    try:
        db = sqlite3.connect(f"{path.resolve().as_uri()}?mode=ro", uri=True)
        try:
            tables = {row[0] for row in db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            meta = dict(db.execute("SELECT key, value FROM lineproof_meta")) if "lineproof_meta" in tables else {}
        finally:
            db.close()
    except sqlite3.OperationalError:
        return None  # busy or mid-recovery: cannot tell now; the run checks again when it opens it
    except sqlite3.DatabaseError as exc:
        return f"this file is not a readable SQLite database ({exc})", _NOT_OURS_FIX
    if meta.get("application") != APPLICATION:
        return ("this file is a database, but not one lineproof created (a run would refuse it and leave it "
                "untouched)", _NOT_OURS_FIX)
    version = meta.get("schema_version", "0")
    if not version.isdigit() or int(version) > SCHEMA_VERSION:
        return (f"database schema {version} is newer than this lineproof understands ({SCHEMA_VERSION})",
                "upgrade lineproof or use another database file")
    return None


def open_store(location: str | Path) -> ResultStore:
    """A store at ``location``: a file path (SQLite) or a database URL."""
    text = str(location)
    refused = url_problem(text)
    if refused is not None:
        raise InputError(refused[0], key="records.database", fix=refused[1])
    return ResultStore(Path(text))


def _pack_arrays(arrays: Mapping[str, np.ndarray]) -> bytes:
    buffer = io.BytesIO()
    np.savez(buffer, **{name: np.asarray(value) for name, value in arrays.items()})
    return buffer.getvalue()


def unpack_arrays(data: bytes) -> dict[str, np.ndarray]:
    """Arrays stored by the store (numpy .npz; object arrays refused, nothing unpickled)."""
    with np.load(io.BytesIO(data), allow_pickle=False) as archive:
        return {name: archive[name] for name in archive.files}


class ResultStore:
    """Records of runs, calibrations, qualifications, verifications and devices."""

    def __init__(self, path: Path, dialect: Dialect = SQLITE) -> None:
        self.path = Path(path)
        self.dialect = dialect
        self._lock = threading.RLock()
        existed = self.path.exists() and self.path.stat().st_size > 0
        if self.path.exists() and not self.path.is_file():
            raise InputError("this is not a file", path=str(self.path), fix=_NOT_OURS_FIX)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        try:
            self._db = sqlite3.connect(self.path, isolation_level=None, check_same_thread=False, timeout=30.0)
        except sqlite3.Error as exc:
            raise InputError(f"cannot open the results database ({exc})", path=str(self.path), fix=_NOT_OURS_FIX) from exc
        try:
            self._db.execute("PRAGMA foreign_keys = ON")
            if existed:
                self._check_ours_and_migrate()
            else:
                self._create()
        except sqlite3.DatabaseError as exc:
            self._db.close()
            raise InputError(f"not a lineproof results database ({exc}); it was left untouched",
                             path=str(self.path), fix=_NOT_OURS_FIX) from exc
        except InputError:
            self._db.close()
            raise

    # -- schema -------------------------------------------------------------------------------

    @contextmanager
    def _transaction(self) -> Iterator[sqlite3.Connection]:
        with self._lock:
            self._db.execute("BEGIN IMMEDIATE")
            try:
                yield self._db
            except BaseException:
                self._db.execute("ROLLBACK")
                raise
            self._db.execute("COMMIT")

    def _run(self, db: sqlite3.Connection, statement: str, parameters: tuple[Any, ...] = ()) -> sqlite3.Cursor:
        return db.execute(self.dialect.render(statement), parameters)

    def _meta(self) -> dict[str, str]:
        return dict(self._db.execute("SELECT key, value FROM lineproof_meta"))

    def _check_ours_and_migrate(self) -> None:
        tables = {row[0] for row in self._db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        meta = self._meta() if "lineproof_meta" in tables else {}
        if meta.get("application") != APPLICATION:
            raise InputError("this file is a database, but not one lineproof created; it was left untouched",
                             path=str(self.path), fix=_NOT_OURS_FIX)
        version = int(meta.get("schema_version", "0"))
        if version > SCHEMA_VERSION:
            raise InputError(f"database schema {version} is newer than this lineproof understands ({SCHEMA_VERSION})",
                             path=str(self.path), fix="upgrade lineproof or use another database file")
        if version < SCHEMA_VERSION:
            self._keep_copy(version)
            self._migrate(version)

    def _keep_copy(self, version: int) -> None:
        """A copy of an older database, kept beside it before it is migrated."""
        copy = self.path.with_name(f"{self.path.name}.schema{version}-backup")
        number = 1
        while copy.exists():
            number += 1
            copy = self.path.with_name(f"{self.path.name}.schema{version}-backup{number}")
        target = sqlite3.connect(copy)
        try:
            self._db.backup(target)
        finally:
            target.close()

    def _migrate(self, version: int) -> None:
        with self._transaction() as db:
            for step in range(version + 1, SCHEMA_VERSION + 1):
                for statement in MIGRATIONS[step]:
                    self._run(db, statement)
            self._run(db, "UPDATE lineproof_meta SET value = ? WHERE key = 'schema_version'", (str(SCHEMA_VERSION),))

    def _create(self) -> None:
        with self._transaction() as db:
            for statement in SCHEMA_1:
                self._run(db, statement)
            self._run(db, "INSERT INTO lineproof_meta (key, value) VALUES (?, ?)", ("application", APPLICATION))
            self._run(db, "INSERT INTO lineproof_meta (key, value) VALUES (?, ?)", ("schema_version", "1"))
        self._migrate(1)

    @property
    def schema_version(self) -> int:
        with self._lock:
            return int(self._meta()["schema_version"])

    # -- runs -----------------------------------------------------------------------------------

    def start_run(self, run: Mapping[str, object]) -> None:
        """Insert a run row (columns of the ``runs`` table)."""
        columns = ", ".join(run)
        slots = ", ".join("?" for _ in run)
        with self._transaction() as db:
            self._run(db, f"INSERT INTO runs ({columns}) VALUES ({slots})", tuple(run.values()))

    def set_run_status(self, run_id: str, status: str, reason: str | None = None,
                       finished_utc: str | None = None) -> None:
        with self._transaction() as db:
            self._run(db, "UPDATE runs SET status = ?, status_reason = ?, finished_utc = ? WHERE run_id = ?",
                      (status, reason, finished_utc, run_id))

    def update_run(self, run_id: str, values: Mapping[str, object]) -> None:
        assignments = ", ".join(f"{column} = ?" for column in values)
        with self._transaction() as db:
            self._run(db, f"UPDATE runs SET {assignments} WHERE run_id = ?", (*values.values(), run_id))

    def run(self, run_id: str) -> dict[str, Any] | None:
        rows = self.rows("SELECT * FROM runs WHERE run_id = ?", (run_id,))
        return rows[0] if rows else None

    # -- calibrations, qualifications, verifications --------------------------------------------

    def save_calibration(self, run_id: str, cal: CalibrationRecord, station: str) -> Path:
        """Keep the calibration's terms and residual model as files (:mod:`lineproof.calstore`, in
        ``calibrations/`` beside the database) and its description as a row."""
        saved = calstore.save_calibration(cal, self.path.parent / CALIBRATIONS_FOLDER)
        plan, who = cal.plan, cal.instrument
        with self._transaction() as db:
            self._run(db, "INSERT INTO calibrations (calibration_id, created_utc, method, kit_name, kit_sha256, analyzer,"
                      " analyzer_manufacturer, analyzer_model, analyzer_serial, analyzer_firmware, resource, station,"
                      " start_hz, stop_hz, points, if_bandwidth_hz, power_dbm, reference_impedance_ohm, temperature_c,"
                      " run_id, file) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                      (cal.calibration_id, cal.created_utc, cal.method, cal.kit_name, cal.kit_hash, who.describe(),
                       who.manufacturer, who.model, who.serial, who.firmware, who.resource, station, plan.start_hz,
                       plan.stop_hz, plan.points, plan.if_bandwidth_hz, plan.power_dbm, cal.reference_impedance_ohm,
                       cal.temperature_c, run_id, saved.relative_to(self.path.parent).as_posix()))
            self._run(db, "UPDATE runs SET calibration_id = ?, calibration_method = ?, cal_kit = ? WHERE run_id = ?",
                      (cal.calibration_id, cal.method, cal.kit_name, run_id))
        return saved

    def load_calibration(self, calibration_id: str) -> CalibrationRecord | None:
        """A calibration this database describes, read back from its saved files."""
        rows = self.rows("SELECT file FROM calibrations WHERE calibration_id = ?", (calibration_id,))
        if not rows:
            return None
        return calstore.load_calibration(self.path.parent / str(rows[0]["file"]))

    def record_qualification(self, run_id: str, calibration_id: str, qualification: TerminationQualification,
                             measured_utc: str, trace: Mapping[str, np.ndarray] | None = None) -> int:
        """A termination qualification; ``trace`` keeps its per-point arrays (corrected
        reflection and uncertainty) so that a resumed run can rely on it as the first did."""
        q = qualification
        packed = None if trace is None else _pack_arrays(trace)
        with self._transaction() as db:
            cursor = self._run(db, "INSERT INTO qualifications (run_id, calibration_id, termination, measured_utc,"
                               " worst_vswr, worst_frequency_hz, limit_vswr, expanded_uncertainty, passed, trace)"
                               " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                               (run_id, calibration_id, q.name, measured_utc, q.worst_vswr, q.worst_frequency_hz,
                                q.limit_vswr, q.expanded_uncertainty, int(q.passed), packed))
            self._run(db, "UPDATE runs SET termination = ?, termination_worst_vswr = ?, termination_limit_vswr = ?,"
                      " termination_passed = ? WHERE run_id = ?",
                      (q.name, q.worst_vswr, q.limit_vswr, int(q.passed), run_id))
            return int(cursor.lastrowid)

    def record_verification(self, run_id: str, result: VerificationResult, station: str, analyzer: str,
                            criterion: str = "", history: Sequence[Mapping[str, object]] = (),
                            suspect: SuspectWindow | None = None) -> int:
        """A check-standard verification with its bands, the figures it adds to the check
        standard's history (``history``: columns of ``check_history``) and, when it failed,
        the devices it makes suspect -- all in one transaction."""
        signals = None if result.control_signals is None else "; ".join(result.control_signals)
        in_control = None if result.control_signals is None else int(not result.control_signals)
        with self._transaction() as db:
            cursor = self._run(db, "INSERT INTO verifications (run_id, calibration_id, check_standard, measured_utc,"
                               " devices_before, worst_deviation, worst_frequency_hz, tolerance, passed, station, analyzer,"
                               " criterion, en, repeats, temperature_c, in_control, control_signals)"
                               " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                               (run_id, result.calibration_id, result.check_standard, result.measured_utc,
                                result.devices_before, result.sweep_worst_deviation, result.sweep_worst_frequency_hz,
                                result.tolerance, int(result.passed), station, analyzer, criterion, result.en,
                                result.repeats, result.temperature_c, in_control, signals))
            verification_id = int(cursor.lastrowid)
            for band in result.bands:
                self._run(db, "INSERT INTO verification_bands (verification_id, band, start_hz, stop_hz,"
                          " measured_reflection, reference_reflection, worst_deviation, worst_frequency_hz, tolerance,"
                          " passed, en, measured_uncertainty, reference_uncertainty)"
                          " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                          (verification_id, band.name, band.start_hz, band.stop_hz, band.measured_reflection,
                           band.reference_reflection, band.worst_deviation, band.worst_frequency_hz, band.tolerance,
                           int(band.passed), band.en, band.measured_uncertainty, band.reference_uncertainty))
            for entry in history:
                row = {**entry, "verification_id": verification_id, "run_id": run_id}
                columns = ", ".join(row)
                self._run(db, f"INSERT INTO check_history ({columns}) VALUES ({', '.join('?' for _ in row)})",
                          tuple(row.values()))
            if suspect is not None:
                self._run(db, "UPDATE devices SET suspect = 1, suspect_reason = ?, suspect_verification_id = ?"
                          " WHERE run_id = ? AND calibration_id = ? AND position > ? AND position <= ? AND suspect = 0",
                          (suspect.reason, verification_id, run_id, suspect.calibration_id, suspect.after_position,
                           suspect.up_to_position))
            return verification_id

    def check_history(self, station: str, analyzer: str, check_standard: str, figure: str) -> list[dict[str, Any]]:
        """One check standard's history of one figure on one station and analyzer, oldest first."""
        # A check in the baseline passed exactly when it agreed with its reference (the chart
        # does not judge it): "check_passed" is what decides whether it may set the limits.
        return self.rows("SELECT h.*, v.passed AS check_passed"
                         " FROM check_history h JOIN verifications v ON v.verification_id = h.verification_id"
                         " WHERE h.station = ? AND h.analyzer = ? AND h.check_standard = ? AND h.figure = ?"
                         " ORDER BY h.history_id", (station, analyzer, check_standard, figure))

    def record_study(self, run_id: str, readings: Sequence[Mapping[str, object]],
                     results: Sequence[Mapping[str, object]]) -> None:
        """A repeatability study's readings and its per-band results, in one transaction (in
        place of any the run recorded before: a resumed study is measured again whole)."""
        with self._transaction() as db:
            for table in ("study_readings", "study_results"):
                self._run(db, f"DELETE FROM {table} WHERE run_id = ?", (run_id,))
            for table, rows in (("study_readings", readings), ("study_results", results)):
                for row in rows:
                    self._run(db, f"INSERT INTO {table} ({', '.join(row)}) VALUES ({', '.join('?' for _ in row)})",
                              tuple(row.values()))

    # -- devices ----------------------------------------------------------------------------------

    def record_device(self, run_id: str, result: DeviceResult, touchstone: str, *, position: int | None = None,
                      calibration_id: str | None = None, qualification_id: int | None = None,
                      verification_id: int | None = None, file_sha256: str | None = None,
                      uncertainty: np.ndarray | None = None,
                      metrics: Mapping[tuple[str, str], tuple[float, str]] | None = None,
                      arrays: Mapping[str, np.ndarray] | None = None) -> int:
        """One row per device, one per band and one per extra metric, in one transaction.
        ``uncertainty`` (the headline figure's, per point) and ``arrays`` (more per-point arrays)
        are kept in the row's ``uncertainty`` column (numpy .npz bytes)."""
        kept = dict(arrays or {})
        if uncertainty is not None:
            kept["expanded_uncertainty"] = uncertainty
        packed = _pack_arrays(kept) if kept else None
        with self._transaction() as db:
            cursor = self._run(db, "INSERT INTO devices (run_id, serial, model, measured_utc, verdict, touchstone, position,"
                               " calibration_id, qualification_id, verification_id, file_sha256, uncertainty)"
                               " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                               (run_id, result.device.serial, result.device.model, result.measured_utc,
                                result.verdict.value, touchstone, position, calibration_id, qualification_id,
                                verification_id, file_sha256, packed))
            device_row = int(cursor.lastrowid)
            for b in result.bands:
                self._run(db, "INSERT INTO band_results (device_row, band, start_hz, stop_hz, limit_vswr, worst_vswr,"
                          " worst_frequency_hz, mean_vswr, worst_return_loss_db, expanded_uncertainty, verdict,"
                          " decision_rule, figure) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                          (device_row, b.limit.name, b.limit.start_hz, b.limit.stop_hz, b.limit.max_vswr,
                           b.worst_vswr, b.worst_frequency_hz, b.mean_vswr, b.worst_return_loss_db,
                           b.expanded_uncertainty, b.verdict.value, b.decision_rule, b.headline))
            for (band, metric), (value, unit) in (metrics or {}).items():
                self._run(db, "INSERT INTO band_metrics VALUES (?, ?, ?, ?, ?)", (device_row, band, metric, value, unit))
            for m in result.markers:
                delay = None if m.group_delay_s is None or m.group_delay_s != m.group_delay_s else m.group_delay_s
                self._run(db, "INSERT INTO markers (device_row, marker, frequency_hz, figure, vswr, return_loss_db,"
                          " expanded_uncertainty, insertion_loss_db, insertion_loss_expanded_uncertainty_db, phase_deg,"
                          " phase_expanded_uncertainty_deg, group_delay_s, group_delay_expanded_uncertainty_s)"
                          " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                          (device_row, m.name, m.frequency_hz, m.figure, m.vswr, m.return_loss_db,
                           m.expanded_uncertainty, m.insertion_loss_db, m.insertion_loss_uncertainty_db, m.phase_deg,
                           m.phase_uncertainty_deg, delay, None if delay is None else m.group_delay_uncertainty_s))
        return device_row

    # -- reading ------------------------------------------------------------------------------------

    def rows(self, sql: str, parameters: tuple[object, ...] = ()) -> list[dict[str, Any]]:
        """Rows as dictionaries keyed by column name (read-only use)."""
        with self._lock:
            cursor = self._db.execute(self.dialect.render(sql), parameters)
            names = [column[0] for column in cursor.description]
            return [dict(zip(names, row, strict=True)) for row in cursor.fetchall()]

    def query(self, sql: str, parameters: tuple[object, ...] = ()) -> list[tuple[object, ...]]:
        """Rows as tuples (read-only use)."""
        with self._lock:
            return list(self._db.execute(self.dialect.render(sql), parameters))

    def close(self) -> None:
        with self._lock:
            self._db.close()

    def __enter__(self) -> ResultStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
