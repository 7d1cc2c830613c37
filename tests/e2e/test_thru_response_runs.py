"""A transmission-only check end to end (tests/sequences/thru-response.toml): `lineproof check`
refuses what a thru response cannot do, a run calibrates with the thru, measures S21 of each
device normalized and records insertion loss whose interval holds the bench's hidden truth."""

from __future__ import annotations

import sqlite3
from pathlib import Path

import numpy as np
import skrf
from record_checks import check_records_agree, run_cli

from lineproof import metrics
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient
from lineproof.store import unpack_arrays

TESTS = Path(__file__).parent.parent
SEQUENCE = TESTS / "sequences" / "thru-response.toml"
GRID = {"start_hz": 10e6, "stop_hz": 500e6, "points": 201}


def variant(folder: Path, replace: dict[str, str]) -> Path:
    text = SEQUENCE.read_text(encoding="utf-8").replace(
        '"../scenarios/two-port-bench.toml"', f'"{(TESTS / "scenarios" / "two-port-bench.toml").as_posix()}"')
    for old, new in replace.items():
        assert old in text, old
        text = text.replace(old, new)
    path = folder / "sequence.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_check_refuses_a_reflection_limit_on_a_thru_response_check(tmp_path: Path) -> None:
    path = variant(tmp_path, {"max_insertion_loss_db = 1.0\n": "max_insertion_loss_db = 1.0\nmax_vswr = 1.3\n",
                              "raw_load_match_db = 16.5 ": "# raw_load_match_db = 16.5 "})
    completed = run_cli("check", str(path), cwd=tmp_path)
    assert completed.returncode == 3, completed.stdout + completed.stderr
    lines = (completed.stdout + completed.stderr).splitlines()
    limit = next(line for line in lines if "[band[1].max_vswr]" in line)
    line = path.read_text(encoding="utf-8").splitlines().index("max_vswr = 1.3") + 1  # the key's own line
    assert limit.strip().startswith(f"{path}:{line} [band[1].max_vswr]: band pass limits reflection, and a "
                                    "thru-response calibration measures transmission only -- fix: remove max_vswr "
                                    'from the band, or calibrate with method = "solt" or "one-path"')
    assert any("[station.uncertainty]" in line and "raw_source_match_db and raw_load_match_db" in line for line in lines)


def test_a_thru_response_run_records_insertion_loss_the_truth_confirms(tmp_path: Path) -> None:
    completed = run_cli("run", str(variant(tmp_path, {})), "--records", "rec", cwd=tmp_path)
    assert completed.returncode == 0, completed.stdout + completed.stderr
    assert "calibrated: thru response (transmission normalization)" in completed.stdout
    assert "pass IL " in completed.stdout
    records = tmp_path / "rec"
    with sqlite3.connect(records / "results.sqlite") as db:
        (run_id,), = db.execute("SELECT run_id FROM runs").fetchall()
        bands = db.execute("SELECT worst_vswr, mean_vswr, figure, verdict FROM band_results").fetchall()
        rows = db.execute("SELECT serial, touchstone, uncertainty FROM devices ORDER BY position").fetchall()
    assert bands == [(None, None, "insertion-loss", "pass")] * 4
    metadata = check_records_agree(records, run_id)
    for keys in metadata.values():
        assert keys["calibration.method"] == "thru response (transmission normalization)"
        assert keys["termination.name"] == "none" and keys["figures.judged"] == "insertion-loss"
        assert keys["data"].startswith("S21 normalized by a thru response")
        assert keys["normalization.raw_source_match"].startswith("0.1884")
        assert float(keys["band.pass.normalization.mismatch_bound_db"]) > 0
    with SimulatedBench(TESTS / "scenarios" / "two-port-bench.toml") as bench, \
            BenchControlClient(bench.control_address) as control:
        truth = {serial: control.request("truth_s", object=serial, **GRID)["s"]["s21"] for serial, _, _ in rows}
    widest = {}
    for serial, touchstone, packed in rows:
        network = skrf.Network(str(records / touchstone))
        assert np.isnan(network.s[:, 0, 0]).all() and np.isnan(network.s[:, 1, 1]).all()  # not measured
        u = unpack_arrays(packed)["insertion-loss.expanded_uncertainty"]
        true = np.array(truth[serial]["re"]) + 1j * np.array(truth[serial]["im"])
        error = np.abs(metrics.insertion_loss_db(network.s[:, 1, 0]) - metrics.insertion_loss_db(true))
        assert np.all(error <= u), (serial, float(np.max(error / u)))
        widest[serial] = float(u.max())
    # the filters' stopbands (outside the band, where nothing is known of their match but their
    # transmission) are where the interval widens; the meter heads pass everything
    assert min(widest["TL30-0001"], widest["TL30-0002"]) > 3.0 > max(widest["TM150-0001"], widest["TM150-0002"])
    report = run_cli("report", run_id, "--records", "rec", "--out", "report", cwd=tmp_path)
    assert report.returncode == 0, report.stderr
    html = (tmp_path / "report" / "report.html").read_text(encoding="utf-8")
    assert html.count('alt="insertion loss of ') == 4 and 'alt="VSWR of ' not in html
    assert "IL 0.1" in html  # the verdict table shows the insertion loss the verdicts are on
