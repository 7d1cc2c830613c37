"""Every example sequence shipped in sequences/ checks clean and runs on its shipped simulated
scenario, with results compared against facts of the trade and the bench's hidden truth."""

from __future__ import annotations

import sqlite3
from importlib import resources
from pathlib import Path

import numpy as np
import pytest
from record_checks import check_records_agree, run_cli

from lineproof import metrics
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient

SHIPPED = Path(str(resources.files("lineproof.sequences")))
EXAMPLES = sorted(p.name for p in SHIPPED.glob("*.toml"))


def database_rows(records: Path, sql: str) -> list[tuple]:
    with sqlite3.connect(records / "results.sqlite") as db:
        return db.execute(sql).fetchall()


@pytest.mark.parametrize("name", EXAMPLES)
def test_every_shipped_sequence_checks_clean(name: str, tmp_path: Path) -> None:
    completed = run_cli("check", str(SHIPPED / name), cwd=tmp_path)
    assert completed.returncode == 0, completed.stderr
    assert "no problems found" in completed.stdout


def test_the_examples_are_the_ones_documented() -> None:
    assert {"demo-switch.toml", "demo-bench.toml", "attended-serial.toml", "qualify-termination.toml",
            "verify-only.toml", "two-port-batch.toml", "attended-one-path.toml"} <= set(EXAMPLES)


def test_verification_only(tmp_path: Path) -> None:
    completed = run_cli("run", str(SHIPPED / "verify-only.toml"), "--records", "rec", cwd=tmp_path)
    assert completed.returncode == 0, completed.stderr
    checks = database_rows(tmp_path / "rec", "SELECT passed, worst_deviation, tolerance FROM verifications")
    bands = database_rows(tmp_path / "rec", "SELECT measured_reflection FROM verification_bands")
    assert len(checks) == 1 and checks[0][0] == 1 and checks[0][1] <= checks[0][2]
    # A 100-ohm termination on a 50-ohm line: |Γ| = (100 - 50) / (100 + 50) = 1/3 (definition of Γ).
    assert all(abs(m - 1 / 3) < 0.02 for (m,) in bands)
    assert database_rows(tmp_path / "rec", "SELECT COUNT(*) FROM devices") == [(0,)]


def test_termination_qualification_only(tmp_path: Path) -> None:
    completed = run_cli("run", str(SHIPPED / "qualify-termination.toml"), "--records", "rec", cwd=tmp_path)
    assert completed.returncode == 0, completed.stderr
    (worst, at_hz, u, passed), = database_rows(
        tmp_path / "rec", "SELECT worst_vswr, worst_frequency_hz, expanded_uncertainty, passed FROM qualifications")
    assert passed == 1 and worst <= 1.05  # common practice: 1.05:1 or better
    # Against the truth: the termination's true |Γ| at the worst point is within the reported U.
    with SimulatedBench("demo-bench") as bench, BenchControlClient(bench.control_address) as control:
        s11 = control.request("truth_s", object="good-termination", start_hz=at_hz, stop_hz=at_hz, points=1)["s"]["s11"]
    true_reflection = abs(complex(s11["re"][0], s11["im"][0]))
    assert abs(float(metrics.reflection_from_vswr(worst)) - true_reflection) <= u

    worn = (SHIPPED / "qualify-termination.toml").read_text(encoding="utf-8").replace(
        'name = "good-termination"', 'name = "poor-termination"')
    (tmp_path / "worn.toml").write_text(worn, encoding="utf-8")
    refused = run_cli("run", "worn.toml", "--records", "rec", cwd=tmp_path)
    assert refused.returncode == 2 and "poor-termination failed qualification" in refused.stderr


def test_the_simulated_operator_bench(tmp_path: Path) -> None:
    completed = run_cli("run", str(SHIPPED / "demo-bench.toml"), "--records", "rec", cwd=tmp_path)
    assert completed.returncode == 1, completed.stderr  # TM150-0004 (a 44-ohm through-line) fails
    (run_id,), = database_rows(tmp_path / "rec", "SELECT run_id FROM runs")
    metadata = check_records_agree(tmp_path / "rec", run_id)
    assert metadata["TM150-0004"]["verdict"] == "fail" and len(metadata) == 6


def test_an_attended_single_device_check_on_a_serial_analyzer(tmp_path: Path) -> None:
    answers = "\n".join(["", "", "", "", "", "TSA2-0001", ""]) + "\n"
    completed = run_cli("run", str(SHIPPED / "attended-serial.toml"), "--records", "rec", "--operator", "A. Tester",
                        cwd=tmp_path, stdin=answers)
    assert completed.returncode == 0, completed.stdout + completed.stderr
    assert "enter or scan its serial" in completed.stdout and "tested tray" in completed.stdout
    (run_id,), = database_rows(tmp_path / "rec", "SELECT run_id FROM runs")
    metadata = check_records_agree(tmp_path / "rec", run_id)
    assert list(metadata) == ["TSA2-0001"]
    device = metadata["TSA2-0001"]
    assert device["operator"] == "A. Tester" and device["sweep.points"] == "201"
    assert device["analyzer.identity"].startswith("Tarnmoor Instruments SIM-S2")
    assert np.isclose(float(device["sweep.stop_hz"]), 500e6)
