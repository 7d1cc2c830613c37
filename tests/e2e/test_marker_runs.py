"""Named markers and group delay end to end, against the simulated bench's hidden truth: what
each device reads at a marker -- its match, insertion loss, the phase of S21 and its group
delay, each with its uncertainty -- goes into the database, the Touchstone metadata and the
report, and holds the truth; so does each band's group delay."""

from __future__ import annotations

import math
import sqlite3
from collections.abc import Callable
from pathlib import Path

import numpy as np
from record_checks import check_records_agree, run_cli

from lineproof import metrics
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient

TESTS = Path(__file__).parent.parent
TWO_PORT_BENCH = TESTS / "scenarios" / "two-port-bench.toml"
#: One bench is one draw of actual standards, its errors shared by every device and frequency
#: (tests/e2e/test_two_port_runs.py): a reflection may lie up to 1.5 U from the truth there.
BOUNDED = 1.5


def two_port_sequence(folder: Path, method: str) -> Path:
    """tests/sequences/thru-response.toml (markers at 50 and 300 MHz), with ``method``."""
    text = (TESTS / "sequences" / "thru-response.toml").read_text(encoding="utf-8")
    text = text.replace('"../scenarios/two-port-bench.toml"', f'"{TWO_PORT_BENCH.as_posix()}"')
    text = text.replace('method = "thru-response"', f'method = "{method}"')
    if method != "thru-response":
        text = text.replace("device_max_vswr = 1.25", "")
    path = folder / f"{method}.toml"
    path.write_text(text, encoding="utf-8")
    return path


def recorded_markers(records: Path) -> dict[tuple[str, str], dict[str, float]]:
    with sqlite3.connect(records / "results.sqlite") as db:
        db.row_factory = sqlite3.Row
        rows = db.execute("SELECT d.serial, m.* FROM markers m JOIN devices d ON d.device_row = m.device_row").fetchall()
    return {(row["serial"], row["marker"]): dict(row) for row in rows}


def true_s21(control: BenchControlClient, serial: str, hz: float, step: float) -> tuple[complex, float, float]:
    """S21 at ``hz``, its group delay by the central difference over ±``step`` (as the sweep
    takes it) and its group delay itself (over ±1 kHz)."""
    def delay(spacing: float) -> float:
        s21 = control.truth_s(object=serial, start_hz=hz - spacing, stop_hz=hz + spacing, points=3)["s21"]
        return float(-np.angle(s21[2] / s21[0]) / (2 * np.pi * 2 * spacing))

    s21 = control.truth_s(object=serial, start_hz=hz, stop_hz=hz, points=1)["s21"][0]
    return s21, delay(step), delay(1e3)


def test_markers_and_group_delay_hold_the_truth_with_full_s_parameters(tmp_path: Path) -> None:
    # method "best" on this bench: SOLT (the transmission-only check needs no termination)
    completed = run_cli("run", str(two_port_sequence(tmp_path, "best")), "--records", "rec", cwd=tmp_path)
    assert completed.returncode == 0, completed.stdout + completed.stderr
    assert "calibration method: solt, chosen by lineproof" in completed.stdout
    records = tmp_path / "rec"
    with sqlite3.connect(records / "results.sqlite") as db:
        (run_id,), = db.execute("SELECT run_id FROM runs").fetchall()
        delays = dict(((serial, metric), value) for serial, metric, value in db.execute(
            "SELECT d.serial, b.metric, b.value FROM band_metrics b JOIN devices d ON d.device_row = b.device_row"
            " WHERE b.metric LIKE 'group_delay.%' AND b.unit = 's'"))
    metadata = check_records_agree(records, run_id)
    found = recorded_markers(records)
    assert len(found) == 8 and len(delays) == 8  # 4 devices x 2 markers; x 1 band x (min, max)
    step = 490e6 / 200  # the sweep's point spacing
    with SimulatedBench(TWO_PORT_BENCH) as bench, BenchControlClient(bench.control_address) as control:
        for (serial, name), m in found.items():
            hz = m["frequency_hz"]
            assert abs(hz - {"f50": 50e6, "stop": 300e6}[name]) <= step / 2
            truth = control.truth_s(object=serial, start_hz=hz, stop_hz=hz, points=1)
            s21, sampled, derivative = true_s21(control, serial, hz, step)
            # the headline match figure here is S11 (input match): its VSWR against the true |S11|
            assert m["figure"] == "input-match"
            true_vswr = float(metrics.vswr_from_reflection(abs(truth["s11"][0])))
            reflection = (m["vswr"] - 1) / (m["vswr"] + 1)
            assert abs(reflection - abs(truth["s11"][0])) <= BOUNDED * m["expanded_uncertainty"], (serial, name)
            assert math.isclose(m["return_loss_db"], float(metrics.return_loss_db(reflection)), rel_tol=1e-9)
            assert (true_vswr > 100) == (name == "stop" and serial.startswith("TL30"))  # the filters' stopband
            assert abs(m["insertion_loss_db"] - float(metrics.insertion_loss_db(s21))) <= \
                m["insertion_loss_expanded_uncertainty_db"], (serial, name)
            turned = math.degrees(abs(np.angle(np.exp(1j * math.radians(m["phase_deg"])) / s21)))
            assert turned <= m["phase_expanded_uncertainty_deg"], (serial, name, turned)
            assert abs(m["group_delay_s"] - sampled) <= m["group_delay_expanded_uncertainty_s"], (serial, name)
            # against the derivative itself the central difference over 2.45 MHz is off by its
            # own discretization too: within U plus 2 % here
            assert abs(m["group_delay_s"] - derivative) <= m["group_delay_expanded_uncertainty_s"] + 0.02 * abs(
                derivative), (serial, name)
            keys = metadata[serial]
            assert float(keys[f"marker.{name}.insertion_loss_db"]) == round(m["insertion_loss_db"], 4)
            assert float(keys[f"marker.{name}.group_delay_s"]) == float(f"{m['group_delay_s']:.6g}")
            # read at the nearest point; the file keeps the frequency the sequence named beside it
            named = {"f50": 50e6, "stop": 300e6}[name]
            assert float(keys[f"marker.{name}.frequency_hz"]) == hz
            assert (float(keys[f"marker.{name}.requested_hz"]) if hz != named
                    else f"marker.{name}.requested_hz" not in keys) == (named if hz != named else True)
        # each band's group delay: the truth's over the band's sweep points, within what the
        # phase's uncertainty allows there (the f50 marker's bound, inside the band)
        f = np.linspace(10e6, 500e6, 201)
        inside = (f >= 10e6) & (f <= 100e6)
        for serial in {serial for serial, _ in found}:
            tau = metrics.group_delay_s(f, control.truth_s(object=serial, start_hz=10e6, stop_hz=500e6,
                                                           points=201)["s21"])[inside]
            low, high = delays[(serial, "group_delay.min")], delays[(serial, "group_delay.max")]
            bound = found[(serial, "f50")]["group_delay_expanded_uncertainty_s"]
            assert abs(low - tau.min()) <= bound and abs(high - tau.max()) <= bound, (serial, low, high)
            assert high - low > 2 * bound or serial.startswith("TM150")  # a filter's delay is not flat
            assert float(metadata[serial]["band.pass.group_delay.min_s"]) == float(f"{low:.6g}")
    report = run_cli("report", run_id, "--records", "rec", "--out", "report", cwd=tmp_path)
    assert report.returncode == 0, report.stderr
    html = (tmp_path / "report" / "report.html").read_text(encoding="utf-8")
    assert "<h2>Markers</h2>" in html and "<h2>Group delay</h2>" in html and html.count("<td>f50</td>") == 4


def test_markers_of_a_thru_response_check_hold_the_truth(tmp_path: Path) -> None:
    completed = run_cli("run", str(two_port_sequence(tmp_path, "thru-response")), "--records", "rec", cwd=tmp_path)
    assert completed.returncode == 0, completed.stdout + completed.stderr
    found = recorded_markers(tmp_path / "rec")
    with SimulatedBench(TWO_PORT_BENCH) as bench, BenchControlClient(bench.control_address) as control:
        for (serial, name), m in found.items():
            assert m["vswr"] is None and m["figure"] is None  # a thru response measures no reflection
            s21, sampled, _ = true_s21(control, serial, m["frequency_hz"], 490e6 / 200)
            assert abs(m["insertion_loss_db"] - float(metrics.insertion_loss_db(s21))) <= \
                m["insertion_loss_expanded_uncertainty_db"], (serial, name)
            turned = math.degrees(abs(np.angle(np.exp(1j * math.radians(m["phase_deg"])) / s21)))
            assert turned <= m["phase_expanded_uncertainty_deg"], (serial, name)
            assert abs(m["group_delay_s"] - sampled) <= m["group_delay_expanded_uncertainty_s"], (serial, name)
    # in the filters' stopband the mismatch a normalization leaves widens every interval
    assert found[("TL30-0001", "stop")]["insertion_loss_expanded_uncertainty_db"] > 3 * \
        found[("TL30-0001", "f50")]["insertion_loss_expanded_uncertainty_db"]


def test_a_one_port_marker_reads_the_as_terminated_truth(tmp_path: Path, sequence_variant: Callable[..., Path]) -> None:
    marker = '[[marker]]\nname = "f146"\nfrequency_hz = 146e6\n\n[calibration]'
    sequence = sequence_variant("batch.toml", {"[calibration]": marker, '"TM150-0003", "TM150-0004", "TM150-0005",\n'
                                               '           "TM150-0006", "TM150-0007", "TM150-0008", "TM150-0009", '
                                               '"TM150-0010"]': '"TM150-0003"]'})
    completed = run_cli("run", str(sequence), "--records", "rec", cwd=tmp_path)
    assert completed.returncode == 0, completed.stdout + completed.stderr
    found = recorded_markers(tmp_path / "rec")
    assert len(found) == 3
    with SimulatedBench(TESTS / "scenarios" / "batch-bench.toml") as bench, \
            BenchControlClient(bench.control_address) as control:
        for (serial, _), m in found.items():
            assert m["figure"] == "as-terminated" and m["insertion_loss_db"] is None and m["group_delay_s"] is None
            control.connect(1, serial, "good-termination")
            truth = abs(control.truth(1, start_hz=m["frequency_hz"], stop_hz=m["frequency_hz"], points=1)[0])
            reflection = (m["vswr"] - 1) / (m["vswr"] + 1)
            assert abs(reflection - truth) <= BOUNDED * m["expanded_uncertainty"], serial
