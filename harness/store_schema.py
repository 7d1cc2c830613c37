"""The results database's schema, its migrations and the SQL dialects it is written for.

The schema is created the way every older database is upgraded: schema 1 first, then each
migration in order, so the upgrade path is exercised by every new database.  Statements use
``?`` placeholders and the type words ``{id}``, ``{blob}`` and ``{real}``, which a
:class:`Dialect` renders for SQLite (the default, an embedded file) or for PostgreSQL (a URL,
for a line of several stations; its driver is not part of this version).

Tables (schema 4)::

    lineproof_meta        key/value: application, schema_version
    runs                  one per run: sequence and its hash, station, operator, analyzer, status
    calibrations          one per solved calibration; ``file`` names its saved terms (calstore)
    qualifications        each termination qualification: calibration, worst VSWR, limit, result, and
                          its corrected trace with uncertainty (numpy .npz bytes)
    verifications         each check-standard verification: calibration, worst deviation, result
    verification_bands    its per-band figures
    devices               one per measured device of a run: verdict, file, calibration, last check
    band_results          per device and band: worst/mean VSWR, return loss, uncertainty, verdict, the
                          headline figure (the reflection columns empty for transmission-only data)
    band_metrics          per device, band and named metric: further figures (unit given)
    check_history         one row per verification and figure (a band's mean |Γ| of the check
                          standard): station, analyzer, check standard, value, spread, En, what
                          its control chart said -- the history the charts are drawn from
    study_readings        each reading of a repeatability study: device, operator, repeat, band
    study_results         per band of a study: repeatability, reproducibility, GR&R, part
                          variation (standard deviations) and their shares of the tolerance
    markers               per device and named marker: the reading there (VSWR, return loss,
                          insertion loss, phase, group delay, each with its uncertainty)
"""

from __future__ import annotations

from dataclasses import dataclass

APPLICATION = "lineproof"
SCHEMA_VERSION = 4


@dataclass(frozen=True)
class Dialect:
    name: str
    placeholder: str
    id_column: str
    blob: str
    real: str

    def render(self, statement: str) -> str:
        text = statement.replace("{id}", self.id_column).replace("{blob}", self.blob).replace("{real}", self.real)
        return text if self.placeholder == "?" else text.replace("?", self.placeholder)


SQLITE = Dialect("sqlite", "?", "INTEGER PRIMARY KEY", "BLOB", "REAL")
POSTGRESQL = Dialect("postgresql", "%s", "BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY", "BYTEA", "DOUBLE PRECISION")

#: Schema 1, exactly as lineproof 0.1 created it.
SCHEMA_1 = (
    """CREATE TABLE lineproof_meta (
        key   TEXT PRIMARY KEY,
        value TEXT NOT NULL
    )""",
    """CREATE TABLE runs (
        run_id TEXT PRIMARY KEY,
        started_utc TEXT NOT NULL,
        finished_utc TEXT,
        status TEXT NOT NULL,
        sequence_name TEXT NOT NULL,
        station TEXT NOT NULL,
        operator TEXT NOT NULL,
        software_version TEXT NOT NULL,
        analyzer TEXT NOT NULL,
        resource TEXT NOT NULL,
        sweep_plan TEXT NOT NULL,
        calibration_id TEXT,
        calibration_method TEXT,
        cal_kit TEXT,
        termination TEXT,
        termination_worst_vswr {real},
        termination_limit_vswr {real},
        termination_passed INTEGER
    )""",
    """CREATE TABLE devices (
        device_row {id},
        run_id TEXT NOT NULL REFERENCES runs(run_id),
        serial TEXT NOT NULL,
        model TEXT NOT NULL,
        measured_utc TEXT NOT NULL,
        verdict TEXT NOT NULL,
        touchstone TEXT NOT NULL,
        UNIQUE (run_id, serial)
    )""",
    """CREATE TABLE band_results (
        device_row INTEGER NOT NULL REFERENCES devices(device_row),
        band TEXT NOT NULL,
        start_hz {real} NOT NULL,
        stop_hz {real} NOT NULL,
        limit_vswr {real} NOT NULL,
        worst_vswr {real} NOT NULL,
        worst_frequency_hz {real} NOT NULL,
        mean_vswr {real} NOT NULL,
        worst_return_loss_db {real} NOT NULL,
        expanded_uncertainty {real},
        verdict TEXT NOT NULL,
        decision_rule TEXT NOT NULL,
        PRIMARY KEY (device_row, band)
    )""",
)

#: Schema 1 -> 2: calibrations, qualifications, verifications, per-band metrics; runs and
#: devices gain the columns a full record needs.  Only additions: nothing is dropped or moved.
MIGRATION_2 = (
    "ALTER TABLE runs ADD COLUMN sequence_file TEXT",
    "ALTER TABLE runs ADD COLUMN sequence_sha256 TEXT",
    "ALTER TABLE runs ADD COLUMN station_file TEXT",
    "ALTER TABLE runs ADD COLUMN status_reason TEXT",
    "ALTER TABLE runs ADD COLUMN analyzer_profile TEXT",
    "ALTER TABLE runs ADD COLUMN decision_rule TEXT",
    "ALTER TABLE runs ADD COLUMN reference_plane TEXT",
    "ALTER TABLE runs ADD COLUMN run_folder TEXT",
    "ALTER TABLE runs ADD COLUMN planned_devices INTEGER",
    """CREATE TABLE calibrations (
        calibration_id TEXT PRIMARY KEY,
        created_utc TEXT NOT NULL,
        method TEXT NOT NULL,
        kit_name TEXT NOT NULL,
        kit_sha256 TEXT NOT NULL,
        analyzer TEXT NOT NULL,
        analyzer_manufacturer TEXT NOT NULL,
        analyzer_model TEXT NOT NULL,
        analyzer_serial TEXT NOT NULL,
        analyzer_firmware TEXT NOT NULL,
        resource TEXT NOT NULL,
        station TEXT NOT NULL,
        start_hz {real} NOT NULL,
        stop_hz {real} NOT NULL,
        points INTEGER NOT NULL,
        if_bandwidth_hz {real} NOT NULL,
        power_dbm {real},
        reference_impedance_ohm {real} NOT NULL,
        temperature_c {real},
        run_id TEXT REFERENCES runs(run_id),
        file TEXT NOT NULL
    )""",
    """CREATE TABLE qualifications (
        qualification_id {id},
        run_id TEXT NOT NULL REFERENCES runs(run_id),
        calibration_id TEXT NOT NULL REFERENCES calibrations(calibration_id),
        termination TEXT NOT NULL,
        measured_utc TEXT NOT NULL,
        worst_vswr {real} NOT NULL,
        worst_frequency_hz {real} NOT NULL,
        limit_vswr {real} NOT NULL,
        expanded_uncertainty {real},
        passed INTEGER NOT NULL,
        trace {blob}
    )""",
    """CREATE TABLE verifications (
        verification_id {id},
        run_id TEXT NOT NULL REFERENCES runs(run_id),
        calibration_id TEXT NOT NULL REFERENCES calibrations(calibration_id),
        check_standard TEXT NOT NULL,
        measured_utc TEXT NOT NULL,
        devices_before INTEGER NOT NULL,
        worst_deviation {real} NOT NULL,
        worst_frequency_hz {real} NOT NULL,
        tolerance {real} NOT NULL,
        passed INTEGER NOT NULL,
        station TEXT NOT NULL,
        analyzer TEXT NOT NULL
    )""",
    """CREATE TABLE verification_bands (
        verification_id INTEGER NOT NULL REFERENCES verifications(verification_id),
        band TEXT NOT NULL,
        start_hz {real} NOT NULL,
        stop_hz {real} NOT NULL,
        measured_reflection {real} NOT NULL,
        reference_reflection {real} NOT NULL,
        worst_deviation {real} NOT NULL,
        worst_frequency_hz {real} NOT NULL,
        tolerance {real} NOT NULL,
        passed INTEGER NOT NULL,
        PRIMARY KEY (verification_id, band)
    )""",
    "ALTER TABLE devices ADD COLUMN position INTEGER",
    "ALTER TABLE devices ADD COLUMN calibration_id TEXT",
    "ALTER TABLE devices ADD COLUMN qualification_id INTEGER",
    "ALTER TABLE devices ADD COLUMN verification_id INTEGER",
    "ALTER TABLE devices ADD COLUMN file_sha256 TEXT",
    # Room for check-standard history (later): a result made doubtful by a failed check.
    "ALTER TABLE devices ADD COLUMN suspect INTEGER NOT NULL DEFAULT 0",
    "ALTER TABLE devices ADD COLUMN uncertainty {blob}",
    """CREATE TABLE band_metrics (
        device_row INTEGER NOT NULL REFERENCES devices(device_row),
        band TEXT NOT NULL,
        metric TEXT NOT NULL,
        value {real},
        unit TEXT NOT NULL,
        PRIMARY KEY (device_row, band, metric)
    )""",
    "CREATE INDEX devices_by_serial ON devices (serial)",
    "CREATE INDEX devices_by_run ON devices (run_id)",
    "CREATE INDEX runs_by_start ON runs (started_utc)",
    "CREATE INDEX verifications_by_run ON verifications (run_id)",
)

#: Schema 2 -> 3: verification over time.  Verifications gain their criterion (En or a fixed
#: tolerance), En, repeats, temperature and what the control chart said; the history of each
#: check standard's figures; suspect results (the column kept in schema 2 gains its reason and
#: the failed check that made it); runs gain their kind and, for a run that measured suspect
#: results again, the run it remeasured; repeatability studies.  Only additions.
MIGRATION_3 = (
    "ALTER TABLE verifications ADD COLUMN criterion TEXT",
    "ALTER TABLE verifications ADD COLUMN en {real}",
    "ALTER TABLE verifications ADD COLUMN repeats INTEGER",
    "ALTER TABLE verifications ADD COLUMN temperature_c {real}",
    "ALTER TABLE verifications ADD COLUMN in_control INTEGER",
    "ALTER TABLE verifications ADD COLUMN control_signals TEXT",
    "ALTER TABLE verification_bands ADD COLUMN en {real}",
    "ALTER TABLE verification_bands ADD COLUMN measured_uncertainty {real}",
    "ALTER TABLE verification_bands ADD COLUMN reference_uncertainty {real}",
    """CREATE TABLE check_history (
        history_id {id},
        verification_id INTEGER NOT NULL REFERENCES verifications(verification_id),
        run_id TEXT NOT NULL REFERENCES runs(run_id),
        calibration_id TEXT,
        station TEXT NOT NULL,
        analyzer TEXT NOT NULL,
        check_standard TEXT NOT NULL,
        figure TEXT NOT NULL,
        measured_utc TEXT NOT NULL,
        value {real} NOT NULL,
        std_dev {real},
        repeats INTEGER NOT NULL,
        reference {real},
        en {real},
        temperature_c {real},
        signals TEXT
    )""",
    "CREATE INDEX check_history_by_key ON check_history (station, analyzer, check_standard, figure, history_id)",
    "ALTER TABLE devices ADD COLUMN suspect_reason TEXT",
    "ALTER TABLE devices ADD COLUMN suspect_verification_id INTEGER",
    "ALTER TABLE runs ADD COLUMN kind TEXT",
    "ALTER TABLE runs ADD COLUMN remeasure_of TEXT",
    """CREATE TABLE study_readings (
        reading_id {id},
        run_id TEXT NOT NULL REFERENCES runs(run_id),
        serial TEXT NOT NULL,
        operator TEXT NOT NULL,
        repeat INTEGER NOT NULL,
        band TEXT NOT NULL,
        figure TEXT NOT NULL,
        value {real} NOT NULL,
        measured_utc TEXT NOT NULL
    )""",
    """CREATE TABLE study_results (
        run_id TEXT NOT NULL REFERENCES runs(run_id),
        band TEXT NOT NULL,
        figure TEXT NOT NULL,
        devices INTEGER NOT NULL,
        operators INTEGER NOT NULL,
        reconnections INTEGER NOT NULL,
        tolerance {real} NOT NULL,
        repeatability_sd {real} NOT NULL,
        reproducibility_sd {real} NOT NULL,
        gauge_sd {real} NOT NULL,
        part_sd {real} NOT NULL,
        repeatability_share {real} NOT NULL,
        reproducibility_share {real} NOT NULL,
        gauge_share {real} NOT NULL,
        method TEXT NOT NULL,
        PRIMARY KEY (run_id, band)
    )""",
)

#: The columns of ``band_results`` schemas 1-3 and 4 share, in order.
_BAND_COLUMNS = ("device_row, band, start_hz, stop_hz, limit_vswr, worst_vswr, worst_frequency_hz, mean_vswr,"
                 " worst_return_loss_db, expanded_uncertainty, verdict, decision_rule")

#: Schema 3 -> 4: transmission-only results and marker readings.  A thru-response calibration
#: measures no reflection, so ``band_results`` keeps its rows with the reflection columns empty
#: and names the band's headline figure (``figure``; NULL in rows from before: as-terminated,
#: or the judged match figure).  The table is rebuilt, the one way SQL relaxes NOT NULL in
#: both dialects: every row is copied as it was.  ``markers``: each named marker's reading of a
#: device (the headline match figure, insertion loss, S21 phase and group delay, each with its
#: expanded uncertainty; NULL where the data have none or the sweep does not resolve it).
MIGRATION_4 = (
    """CREATE TABLE band_results_4 (
        device_row INTEGER NOT NULL REFERENCES devices(device_row),
        band TEXT NOT NULL,
        start_hz {real} NOT NULL,
        stop_hz {real} NOT NULL,
        limit_vswr {real} NOT NULL,
        worst_vswr {real},
        worst_frequency_hz {real} NOT NULL,
        mean_vswr {real},
        worst_return_loss_db {real},
        expanded_uncertainty {real},
        verdict TEXT NOT NULL,
        decision_rule TEXT NOT NULL,
        figure TEXT,
        PRIMARY KEY (device_row, band)
    )""",
    f"INSERT INTO band_results_4 ({_BAND_COLUMNS}) SELECT {_BAND_COLUMNS} FROM band_results",
    "DROP TABLE band_results",
    "ALTER TABLE band_results_4 RENAME TO band_results",
    """CREATE TABLE markers (
        device_row INTEGER NOT NULL REFERENCES devices(device_row),
        marker TEXT NOT NULL,
        frequency_hz {real} NOT NULL,
        figure TEXT,
        vswr {real},
        return_loss_db {real},
        expanded_uncertainty {real},
        insertion_loss_db {real},
        insertion_loss_expanded_uncertainty_db {real},
        phase_deg {real},
        phase_expanded_uncertainty_deg {real},
        group_delay_s {real},
        group_delay_expanded_uncertainty_s {real},
        PRIMARY KEY (device_row, marker)
    )""",
)

#: schema version -> the statements that bring the previous version to it.
MIGRATIONS: dict[int, tuple[str, ...]] = {2: MIGRATION_2, 3: MIGRATION_3, 4: MIGRATION_4}
