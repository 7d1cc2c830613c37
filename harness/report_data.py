"""Everything a report shows about one run, read back from the records: the database rows and
each device's Touchstone file (its trace), never from memory of the run."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from lineproof.check_history import ChartData, history_keys, load_chart
from lineproof.errors import InputError
from lineproof.store import ResultStore, unpack_arrays
from lineproof.touchstone import read_metadata


@dataclass
class DeviceRecord:
    row: dict[str, Any]
    bands: list[dict[str, Any]]
    file: Path
    frequencies_hz: np.ndarray | None = None
    reflection: np.ndarray | None = None  # complex: the headline figure's reflection, as recorded
    uncertainty: np.ndarray | None = None  # expanded (k = 2) |Γ| per point, when evaluated
    metadata: dict[str, str] = field(default_factory=dict)
    problem: str | None = None  # why the trace could not be read, if it could not
    #: Two-port records: the S-parameters (N, 2, 2) and the per-point arrays kept with the row
    #: (each figure's expanded uncertainty, the as-terminated reflection).
    s_parameters: np.ndarray | None = None
    arrays: dict[str, np.ndarray] = field(default_factory=dict)
    #: band -> metric -> (value, unit), from ``band_metrics``
    metrics: dict[str, dict[str, tuple[float | None, str]]] = field(default_factory=dict)
    #: the readings at the sequence's named markers (rows of ``markers``)
    markers: list[dict[str, Any]] = field(default_factory=list)

    @property
    def serial(self) -> str:
        return str(self.row["serial"])

    @property
    def transmission_only(self) -> bool:
        """A thru-response record: S21 alone (the other parameters NaN, not measured)."""
        return self.s_parameters is not None and bool(np.isnan(self.s_parameters[:, 0, 0]).all())

    def figure(self, band: str, name: str) -> dict[str, float | None]:
        """One figure of a band as recorded (empty for a one-port record): worst, mean, limit,
        expanded_uncertainty, worst_upper, worst_frequency, worst_vswr, verdict (a number)."""
        prefix = f"{name}."
        return {metric[len(prefix):]: value for metric, (value, _) in self.metrics.get(band, {}).items()
                if metric.startswith(prefix)}


@dataclass
class RunRecords:
    run: dict[str, Any]
    devices: list[DeviceRecord]
    calibrations: list[dict[str, Any]]
    qualifications: list[dict[str, Any]]
    verifications: list[dict[str, Any]]
    verification_bands: dict[int, list[dict[str, Any]]]
    band_limits: list[dict[str, Any]]
    #: The control charts of the check standards this run verified with (their whole history
    #: on the run's station and analyzer).
    charts: list[ChartData] = field(default_factory=list)
    #: Suspect results measured again: serial -> (the run that did, its verdict).
    remeasured: dict[str, tuple[str, str]] = field(default_factory=dict)
    #: A repeatability study's per-band results and its readings (empty for a batch).
    study: list[dict[str, Any]] = field(default_factory=list)
    study_readings: list[dict[str, Any]] = field(default_factory=list)

    @property
    def counts(self) -> dict[str, int]:
        counts = {"total": len(self.devices), "pass": 0, "fail": 0, "indeterminate": 0, "suspect": 0}
        for device in self.devices:
            counts[str(device.row["verdict"])] = counts.get(str(device.row["verdict"]), 0) + 1
            counts["suspect"] += bool(device.row.get("suspect"))
        return counts


def _read_trace(record: DeviceRecord) -> None:
    import skrf

    try:
        network = skrf.Network(str(record.file))
    except Exception as exc:  # a missing or damaged file is reported in the report, not fatal
        record.problem = f"cannot read {record.file.name}: {type(exc).__name__}: {exc}"[:200]
        return
    record.frequencies_hz = np.asarray(network.f, dtype=float)
    record.reflection = np.asarray(network.s[:, 0, 0])
    record.metadata = read_metadata(network.comments)
    if network.nports == 2:
        record.s_parameters = np.asarray(network.s)
        if record.transmission_only:
            record.reflection = None  # nothing to plot as VSWR; the insertion-loss plot shows it
            return
        # the headline figure is the as-terminated reflection when the record has it
        kept = record.arrays.get("as-terminated.reflection")
        if kept is not None and kept.shape == record.reflection.shape and record.metadata.get(
                "figure", "").startswith("as-terminated"):
            record.reflection = kept


def load_run_records(store: ResultStore, run_id: str, read_traces: bool = True) -> RunRecords:
    """A run's records; InputError when the database has no such run."""
    run = store.run(run_id)
    if run is None:
        raise InputError(f"no run {run_id} in this database", path=str(store.path),
                         fix="check the run id (lineproof results --runs lists them) and --records")
    base = store.path.parent
    devices = []
    for row in store.rows("SELECT * FROM devices WHERE run_id = ? ORDER BY position, device_row", (run_id,)):
        bands = store.rows("SELECT * FROM band_results WHERE device_row = ? ORDER BY start_hz", (row["device_row"],))
        record = DeviceRecord(row, bands, base / str(row["touchstone"]))
        if row.get("uncertainty"):
            record.arrays = unpack_arrays(row["uncertainty"])
            record.uncertainty = record.arrays.get("expanded_uncertainty")
        for metric in store.rows("SELECT band, metric, value, unit FROM band_metrics WHERE device_row = ?",
                                 (row["device_row"],)):
            record.metrics.setdefault(metric["band"], {})[metric["metric"]] = (metric["value"], metric["unit"])
        record.markers = store.rows("SELECT * FROM markers WHERE device_row = ? ORDER BY frequency_hz, marker",
                                    (row["device_row"],))
        if read_traces:
            _read_trace(record)
        devices.append(record)
    verifications = store.rows("SELECT * FROM verifications WHERE run_id = ? ORDER BY verification_id", (run_id,))
    bands: dict[int, list[dict[str, Any]]] = {}
    for check in verifications:
        bands[int(check["verification_id"])] = store.rows(
            "SELECT * FROM verification_bands WHERE verification_id = ? ORDER BY start_hz", (check["verification_id"],))
    calibrations = store.rows(
        "SELECT calibration_id, created_utc, method, kit_name, kit_sha256, analyzer, station, start_hz, stop_hz, points,"
        " if_bandwidth_hz, reference_impedance_ohm, file FROM calibrations WHERE run_id = ?"
        " OR calibration_id IN (SELECT calibration_id FROM devices WHERE run_id = ?) ORDER BY created_utc",
        (run_id, run_id))
    qualifications = store.rows("SELECT * FROM qualifications WHERE run_id = ? ORDER BY qualification_id", (run_id,))
    limits = store.rows(
        "SELECT DISTINCT band, start_hz, stop_hz, limit_vswr FROM band_results WHERE device_row IN"
        " (SELECT device_row FROM devices WHERE run_id = ?) ORDER BY start_hz", (run_id,))
    study = store.rows("SELECT * FROM study_results WHERE run_id = ? ORDER BY band", (run_id,))
    readings = store.rows("SELECT serial, operator, repeat, band, figure, value, measured_utc FROM study_readings"
                          " WHERE run_id = ? ORDER BY reading_id", (run_id,))
    return RunRecords(run, devices, calibrations, qualifications, verifications, bands, limits,
                      _charts(store, run, verifications), _remeasured(store, run_id), study, readings)


def _charts(store: ResultStore, run: dict[str, Any], verifications: list[dict[str, Any]]) -> list[ChartData]:
    charts = []
    for name in dict.fromkeys(str(v["check_standard"]) for v in verifications):
        for key in history_keys(store, station=str(run["station"]), check_standard=name):
            if key.analyzer == run["analyzer"]:
                charts.append(load_chart(store, key))
    return charts


def _remeasured(store: ResultStore, run_id: str) -> dict[str, tuple[str, str]]:
    found: dict[str, tuple[str, str]] = {}
    for serial, again, verdict in store.query(
            "SELECT d.serial, d.run_id, d.verdict FROM devices d JOIN runs r ON r.run_id = d.run_id"
            " WHERE r.remeasure_of = ? ORDER BY r.started_utc, d.position", (run_id,)):
        found[str(serial)] = (str(again), str(verdict))
    return found
