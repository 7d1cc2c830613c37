"""`lineproof demo` as a user runs it: a subprocess in an empty folder."""

from __future__ import annotations

import sqlite3
import subprocess
import sys
from pathlib import Path

import skrf

from lineproof.touchstone import read_metadata

REQUIRED_KEYS = {
    "software", "run.id", "measured_utc", "device.serial", "device.model", "analyzer.identity",
    "analyzer.resource", "sweep.start_hz", "sweep.stop_hz", "sweep.points", "calibration.id",
    "calibration.method", "calibration.kit", "termination.name", "termination.result",
    "band.2m.limit_vswr", "band.2m.verdict", "band.70cm.limit_vswr", "band.70cm.verdict", "verdict",
    "band.2m.expanded_uncertainty", "band.70cm.worst_upper_vswr", "termination.expanded_uncertainty",
    "decision_rule", "uncertainty.method",
}


def run_cli(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "lineproof.cli", *args], cwd=cwd, capture_output=True,
                          text=True, timeout=120)


def test_demo_writes_readable_touchstone_files_and_database(tmp_path: Path) -> None:
    completed = run_cli("demo", "--out", "results", cwd=tmp_path)
    assert completed.returncode == 0, completed.stderr
    assert "worst VSWR" in completed.stdout and "TM150-0004" in completed.stdout
    files = sorted((tmp_path / "results" / "runs").glob("*/*.s1p"))
    assert len(files) == 6
    verdicts = {}
    for path in files:
        network = skrf.Network(str(path))
        assert network.nports == 1 and network.f.size == 401
        metadata = read_metadata(network.comments)
        assert REQUIRED_KEYS <= set(metadata), REQUIRED_KEYS - set(metadata)
        assert metadata["device.serial"] == path.stem
        assert metadata["analyzer.resource"].startswith("TCPIP::127.0.0.1::")
        assert metadata["termination.result"] == "qualified"
        assert metadata["decision_rule"].startswith("guard-banded acceptance, ILAC-G8:09/2019")
        verdicts[path.stem] = metadata["verdict"]
    # The scenario's unit 0004 has a 44-ohm through-line: it must fail.  Unit 0006 was made
    # close to its limits: with the uncertainty in view it may not be called a clear pass.
    # The others are well inside their limits and pass.
    assert verdicts.pop("TM150-0004") == "fail"
    assert verdicts.pop("TM150-0006") in {"pass", "indeterminate"}
    assert set(verdicts.values()) == {"pass"}
    with sqlite3.connect(tmp_path / "results" / "results.sqlite") as db:
        rows = db.execute("SELECT serial, verdict, touchstone FROM devices ORDER BY serial").fetchall()
        status = db.execute("SELECT status FROM runs").fetchall()
    assert [r[0] for r in rows] == [p.stem for p in files]
    assert all((tmp_path / "results" / r[2]).is_file() for r in rows)
    assert status == [("complete",)]


def test_demo_refuses_a_worn_termination(tmp_path: Path) -> None:
    completed = run_cli("demo", "--out", "results", "--worn-termination", cwd=tmp_path)
    assert completed.returncode == 2
    assert "poor-termination failed qualification" in completed.stderr
    assert not list((tmp_path / "results").glob("runs/*/*.s1p"))


def test_version_and_help(tmp_path: Path) -> None:
    version = run_cli("--version", cwd=tmp_path)
    assert version.returncode == 0 and version.stdout.startswith("lineproof ")
    help_text = run_cli("--help", cwd=tmp_path)
    assert help_text.returncode == 0 and "demo" in help_text.stdout
