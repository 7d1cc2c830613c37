"""`lineproof report` and `lineproof results` on a recorded run: what they show is what the
records hold, the HTML is self-contained and escapes user text, CSV cells cannot become formulas."""

from __future__ import annotations

import base64
import csv
import io
import json
import re
import shutil
import sqlite3
from pathlib import Path

import pytest
from record_checks import run_cli

from lineproof.cli import main

SHORT_BATCH = {'"TM150-0006", "TM150-0007", "TM150-0008", "TM150-0009", "TM150-0010"': "",
               'model = "TM-150 inline meter head"': 'model = "=TM-150 <b>head</b>"'}


@pytest.fixture(scope="module")
def recorded_run(tmp_path_factory: pytest.TempPathFactory, sequence_writer) -> tuple[Path, str]:  # noqa: ANN001
    """One short batch for every test here (reports and queries only read it)."""
    folder = tmp_path_factory.mktemp("report")
    sequence = sequence_writer(folder, replace=SHORT_BATCH)
    completed = run_cli("run", str(sequence), "--records", "rec", "--operator", "<script>alert(1)</script>",
                        cwd=folder)
    assert completed.returncode == 1, completed.stderr
    with sqlite3.connect(folder / "rec" / "results.sqlite") as db:
        return folder / "rec", db.execute("SELECT run_id FROM runs").fetchone()[0]


def test_the_report_shows_the_records(tmp_path: Path, recorded_run: tuple[Path, str]) -> None:
    records, run_id = recorded_run
    completed = run_cli("report", run_id, "--records", str(records), cwd=tmp_path)
    assert completed.returncode == 0, completed.stderr
    folder = records / "runs" / run_id
    page = (folder / "report.html").read_text(encoding="utf-8")
    # Self-contained: no external resource of any kind.
    assert not re.search(r'(src|href)="(?!data:)', page)
    images = re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page)
    assert len(images) == 1 + 5 + 2  # the batch overlay, one plot per device, the check standard's chart per band
    assert all(base64.b64decode(i).startswith(b"\x89PNG\r\n\x1a\n") for i in images)
    assert "<script>" not in page and "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "=TM-150 &lt;b&gt;head&lt;/b&gt;" in page
    with sqlite3.connect(records / "results.sqlite") as db:
        db.row_factory = sqlite3.Row
        bands = [dict(r) for r in db.execute(
            "SELECT d.serial, d.verdict AS device_verdict, b.* FROM band_results b JOIN devices d USING (device_row)"
            " ORDER BY d.position, b.start_hz")]
        calibration = db.execute("SELECT calibration_id FROM calibrations").fetchone()[0]
        checks = db.execute("SELECT COUNT(*) FROM verifications").fetchone()[0]
    for serial in ("TM150-0001", "TM150-0004"):
        assert serial in page
    assert calibration in page and "good-termination" in page and page.count("check-75") >= checks

    rows = list(csv.DictReader(io.StringIO((folder / "summary.csv").read_text(encoding="utf-8"))))
    assert len(rows) == len(bands) == 5 * 2
    for row, band in zip(rows, bands, strict=True):
        assert row["serial"] == band["serial"] and row["band"] == band["band"]
        assert float(row["worst_vswr"]) == band["worst_vswr"] and row["band_verdict"] == band["verdict"]
        assert row["model"] == "'=TM-150 <b>head</b>"  # OWASP CSV injection: text starting '=' is quoted

    summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
    assert summary["counts"] == {"total": 5, "pass": 4, "fail": 1, "indeterminate": 0, "suspect": 0}
    assert [d["serial"] for d in summary["devices"] if d["verdict"] == "fail"] == ["TM150-0004"]
    assert len(summary["verifications"]) == checks and summary["run"]["run_id"] == run_id


def test_results_are_found_by_run_serial_verdict_and_date(recorded_run: tuple[Path, str], tmp_path: Path,
                                                          capsys: pytest.CaptureFixture[str]) -> None:
    records, run_id = recorded_run

    def results(*args: str) -> list[dict]:  # the command itself, in this process
        assert main(["results", "--records", str(records), "--json", *args]) == 0
        return json.loads(capsys.readouterr().out)

    assert [r["serial"] for r in results("--verdict", "fail")] == ["TM150-0004"]
    assert len(results("--run", run_id)) == 5
    assert [r["serial"] for r in results("--serial", "TM150-000[12]")] == []  # no pattern syntax but '*'
    assert [r["serial"] for r in results("--serial", "*0002")] == ["TM150-0002"]
    assert len(results("--since", "2000-01-01", "--until", "2999-12-31")) == 5
    assert results("--until", "2000-01-01") == []
    runs = results("--runs")
    assert runs[0]["run_id"] == run_id and runs[0]["devices"] == 5
    assert (runs[0]["failed"], runs[0]["indeterminate"]) == (1, 0)
    assert main(["results", "--records", str(records), "--since", "last tuesday"]) == 3
    assert "is not a date" in capsys.readouterr().err
    assert main(["report", "run-20260101T000000Z-000000", "--records", str(records)]) == 3
    assert "no run" in capsys.readouterr().err
    assert main(["results", "--records", str(tmp_path / "empty")]) == 3 and not (tmp_path / "empty").exists()


def test_the_runs_table_counts_failed_and_indeterminate_apart(recorded_run: tuple[Path, str], tmp_path: Path,
                                                              capsys: pytest.CaptureFixture[str]) -> None:
    records, run_id = recorded_run
    copy = tmp_path / "rec"
    copy.mkdir()
    shutil.copy(records / "results.sqlite", copy / "results.sqlite")
    with sqlite3.connect(copy / "results.sqlite") as db:  # a copy: one result made indeterminate
        db.execute("UPDATE devices SET verdict = 'indeterminate' WHERE serial = 'TM150-0001'")
    assert main(["results", "--records", str(copy), "--runs", "--json"]) == 0
    [run] = json.loads(capsys.readouterr().out)
    assert (run["run_id"], run["devices"], run["failed"], run["indeterminate"]) == (run_id, 5, 1, 1)
    assert main(["results", "--records", str(copy), "--runs"]) == 0
    header, row = capsys.readouterr().out.splitlines()[:2]
    assert header.split()[-3:] == ["devices", "failed", "indeterminate"] and row.split()[-3:] == ["5", "1", "1"]
