"""Checks shared by the end-to-end tests: the database, the run folder and the files agree."""

from __future__ import annotations

import hashlib
import sqlite3
import subprocess
import sys
from pathlib import Path

import skrf

from lineproof.touchstone import read_metadata

#: Every metadata key DESIGN.md's "Records" asks for, as lineproof names them.
FULL_METADATA = {
    "software", "run.id", "sequence", "sequence.sha256", "station", "operator", "device.serial", "device.model",
    "measured_utc", "analyzer.identity", "analyzer.resource", "sweep.start_hz", "sweep.stop_hz", "sweep.points",
    "sweep.if_bandwidth_hz", "calibration.id", "calibration.method", "calibration.kit", "calibration.age_s",
    "termination.name", "termination.worst_vswr", "termination.result", "decision_rule", "verdict",
    "uncertainty", "reference_plane",
}


def run_cli(*args: str, cwd: Path, stdin: str | None = None, timeout: float = 120) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "lineproof.cli", *args], cwd=cwd, capture_output=True, text=True,
                          input=stdin, timeout=timeout)


def device_rows(database: Path, run_id: str | None = None) -> list[dict[str, object]]:
    with sqlite3.connect(database) as db:
        db.row_factory = sqlite3.Row
        sql = "SELECT * FROM devices" + (" WHERE run_id = ?" if run_id else "") + " ORDER BY position"
        return [dict(row) for row in db.execute(sql, (run_id,) if run_id else ())]


def check_records_agree(records: Path, run_id: str) -> dict[str, dict[str, str]]:
    """Every committed device once, its file whole and readable by scikit-rf with its metadata,
    no file the database does not hold, no temporary file.  Returns metadata by serial."""
    database = records / "results.sqlite"
    rows = device_rows(database, run_id)
    serials = [str(r["serial"]) for r in rows]
    assert len(serials) == len(set(serials)), f"a device is recorded twice: {serials}"
    folder = records / "runs" / run_id
    on_disk = sorted(p.name for suffix in ("*.s1p", "*.s2p") for p in folder.glob(suffix))
    assert on_disk == sorted(Path(str(r["touchstone"])).name for r in rows), "database and files disagree"
    assert not list(folder.glob(".partial-*")), "a half-written file was left"
    found = {}
    for row in rows:
        path = database.parent / str(row["touchstone"])
        assert hashlib.sha256(path.read_bytes()).hexdigest() == row["file_sha256"], f"{path} changed"
        network = skrf.Network(str(path))
        metadata = read_metadata(network.comments)
        assert FULL_METADATA <= set(metadata), FULL_METADATA - set(metadata)
        assert metadata["device.serial"] == row["serial"] and metadata["run.id"] == run_id
        assert metadata["verdict"] == row["verdict"] and metadata["calibration.id"] == row["calibration_id"]
        assert int(metadata["device.position"]) == row["position"]
        found[str(row["serial"])] = metadata
    return found


def steps_in_pairs(events: list[dict]) -> list[tuple[str, str, str]]:
    """(step, how it ended, its text) per step; fails unless every step-started is followed,
    before the next one, by a step-finished or step-failed naming the same step."""
    pairs, open_step = [], None
    for event in events:
        kind = event["event"]
        if kind == "step-started":
            assert open_step is None, f"{event['step']!r} started while {open_step!r} had not finished"
            open_step = event["step"]
        elif kind in ("step-finished", "step-failed"):
            assert open_step is not None and event["step"] == open_step, f"{event} without its step-started"
            pairs.append((open_step, kind, event.get("text", event.get("reason"))))
            open_step = None
    assert open_step is None, f"{open_step!r} never finished"
    return pairs

