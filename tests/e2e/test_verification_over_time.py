"""Verification over time, end to end on the drifting bench (simulated-instruments/scenarios/
drifting-bench.toml): the sun reaches the bench between device 9 and device 10 of the batch,
and the bench's hidden truth says which results the warm-up actually spoilt.  On the same bench
with the room holding its temperature, a long batch checked after every device puts nothing in
doubt.

The runs are made in this process (``lineproof.cli.main``) to keep the suite quick; each
starts its own simulated bench, exactly as ``lineproof run`` does.
"""

from __future__ import annotations

import contextlib
import io
import json
import re
import shutil
import sqlite3
from pathlib import Path

import numpy as np
import pytest
import skrf
from record_checks import check_records_agree, device_rows, run_cli

from lineproof.check_history import history_keys, load_chart
from lineproof.cli import main
from lineproof.report_plots import control_chart_figure
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient
from lineproof.store import ResultStore, unpack_arrays

ROOT = Path(__file__).parent.parent.parent
SEQUENCE = ROOT / "sequences" / "drifting-bench.toml"
SCENARIO = ROOT / "simulated-instruments" / "scenarios" / "drifting-bench.toml"
SERIALS = [f"TM150-02{n:02d}" for n in range(1, 17)]
BANDS = {"2m": (144e6, 148e6), "70cm": (420e6, 450e6)}


def _variant(folder: Path, name: str, replace: dict[str, str], session: int | None = None) -> Path:
    """A copy of the shipped drifting sequence; with ``session``, on a private copy of its
    scenario whose connector draws and noise are another session's (another day at the bench)."""
    text = SEQUENCE.read_text(encoding="utf-8")
    if session is not None:
        scenario = SCENARIO.read_text(encoding="utf-8").replace("[analyzer]\n", f"[analyzer]\nsession_seed = {session}\n")
        (folder / f"bench-{session}.toml").write_text(scenario, encoding="utf-8")
        replace = {**replace, 'simulated_bench = "drifting-bench"': f'simulated_bench = "bench-{session}.toml"'}
    for old, new in replace.items():
        assert old in text, old
        text = text.replace(old, new)
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


NO_TEMPERATURE_LIMIT = {"max_temperature_change_k = 1.0 ": "max_temperature_change_k = 100.0 "}
CHECK_ONLY = {'[[step]]\ndo = "measure-batch"\n': "", "[reverify]\nevery_devices = 4\nat_end = true\n": ""}


def _actually_off(records: Path, run_id: str, scenario: Path = SCENARIO) -> set[str]:
    """Devices whose recorded |Γ| lies outside its own stated interval at most points of a band,
    judged against the bench's truth (the devices themselves do not drift; the analyzer does)."""
    off = set()
    with SimulatedBench(scenario) as bench, BenchControlClient(bench.control_address) as control:
        control.request("set", noise=False)
        for row in device_rows(records / "results.sqlite", run_id):
            network = skrf.Network(str(records / str(row["touchstone"])))
            expanded = unpack_arrays(row["uncertainty"])["expanded_uncertainty"]  # type: ignore[arg-type]
            control.connect(1, str(row["serial"]), "good-termination")
            truth = np.abs(control.truth(1, start_hz=100e6, stop_hz=500e6, points=201))
            outside = np.abs(np.abs(network.s[:, 0, 0]) - truth) > expanded
            for start, stop in BANDS.values():
                inside = (network.f >= start) & (network.f <= stop)
                if np.mean(outside[inside]) > 0.5:
                    off.add(str(row["serial"]))
    return off


def _earlier_sessions(folder: Path, records: Path) -> None:
    """Nine earlier sessions at the bench that each calibrate and check once: the control chart's
    baseline (with the batch's first check), one check per calibration."""
    for session in range(1, 10):
        earlier = _variant(folder, f"earlier-{session}.toml", {**NO_TEMPERATURE_LIMIT, **CHECK_ONLY}, session)
        assert main(["run", str(earlier), "--records", str(records)]) == 0


def _run_json(sequence: Path, records: Path) -> dict[str, object]:
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        code = main(["run", str(sequence), "--records", str(records), "--json"])
    events = [json.loads(line) for line in printed.getvalue().splitlines()]
    with sqlite3.connect(records / "results.sqlite") as db:
        run_id = db.execute("SELECT run_id FROM runs ORDER BY rowid DESC LIMIT 1").fetchone()[0]
    return {"records": records, "run_id": run_id, "code": code, "events": events}


@pytest.fixture(scope="module")
def drifted(tmp_path_factory: pytest.TempPathFactory) -> dict[str, object]:
    """The earlier sessions, then the batch on the day the sun comes -- with the temperature
    limit lifted, so that only the check standard can catch it."""
    folder = tmp_path_factory.mktemp("drift")
    records = folder / "rec"
    _earlier_sessions(folder, records)
    return {**_run_json(_variant(folder, "batch.toml", NO_TEMPERATURE_LIMIT), records), "folder": folder}


def test_the_check_standard_catches_the_drift_and_exactly_the_results_in_doubt_are_suspect(drifted) -> None:
    records, run_id = drifted["records"], drifted["run_id"]
    assert drifted["code"] == 1  # complete, with suspect results
    rows = device_rows(records / "results.sqlite", run_id)
    assert [r["serial"] for r in rows] == SERIALS
    suspect = {str(r["serial"]) for r in rows if r["suspect"]}
    # The rule: every device since the last passing check (after device 8) up to the failed one
    # (after device 12).
    assert suspect == set(SERIALS[8:12])
    # The truth: the devices measured after the warm-up with the old calibration are off (10-12);
    # device 9 was measured before it -- in doubt, but right.  Nothing outside the suspect ones
    # is off: the calibration made again at 35 deg C reads the rest right.
    off = _actually_off(records, run_id)
    assert off == set(SERIALS[9:12])
    assert off <= suspect
    with sqlite3.connect(records / "results.sqlite") as db:
        checks = db.execute("SELECT devices_before, passed, en, in_control, control_signals, criterion"
                            " FROM verifications WHERE run_id = ? ORDER BY verification_id", (run_id,)).fetchall()
        calibrations = [c for (c,) in db.execute("SELECT DISTINCT calibration_id FROM devices WHERE run_id = ?"
                                                 " ORDER BY position", (run_id,))]
        reasons = {r[0] for r in db.execute("SELECT suspect_reason FROM devices WHERE suspect = 1")}
    assert [(c[0], c[1]) for c in checks] == [(0, 1), (4, 1), (8, 1), (12, 0), (12, 1), (16, 1)]
    failed = checks[3]
    assert failed[2] > 1 and failed[3] == 0 and "beyond the control limits" in failed[4]  # En and the chart agree
    # The batch's first check completes the chart's baseline (nine earlier sessions + 1); every
    # later passing check is in control, the calibration made at 35 deg C included.
    assert checks[0][3] is None and all(c[3] == 1 for c in checks[1:] if c[1]) and failed[5].startswith("En <= 1")
    assert len(calibrations) == 2  # made again after the failed check, before device 13
    assert len(reasons) == 1 and "failed after device 12" in reasons.pop()
    # A line system is told in one event, with the command that measures them again.
    told = [e for e in drifted["events"] if e["event"] == "suspect"]
    assert [e["serials"] for e in told] == [SERIALS[8:12]] and run_id in told[0]["remeasure_command"]
    checked = [e for e in drifted["events"] if e["event"] == "verification"]
    assert [e["passed"] for e in checked] == [True, True, True, False, True, True] and checked[3]["en"] > 1


def test_suspect_results_are_marked_beside_their_files_and_in_the_summaries(drifted) -> None:
    records, run_id = drifted["records"], drifted["run_id"]
    check_records_agree(records, run_id)  # the result files are whole and unchanged (their SHA-256 in the rows)
    folder = records / "runs" / run_id
    notes = sorted(p.name for p in folder.glob("*.suspect.json"))
    assert notes == [f"{s}.s1p.suspect.json" for s in SERIALS[8:12]]
    note = json.loads((folder / notes[0]).read_text(encoding="utf-8"))
    assert note["serial"] == SERIALS[8] and note["run_id"] == run_id and "remeasure-suspect" in note["remeasure"]
    assert main(["report", run_id, "--records", str(records)]) == 0
    summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
    assert [d["serial"] for d in summary["devices"] if d["suspect"]] == SERIALS[8:12]
    assert summary["counts"]["suspect"] == 4
    html = (folder / "report.html").read_text(encoding="utf-8")
    assert "SUSPECT" in html and "Control chart" in html


def test_the_history_command_prints_the_chart_and_plots_it(drifted, capsys: pytest.CaptureFixture[str]) -> None:
    records, folder = drifted["records"], drifted["folder"]
    capsys.readouterr()
    assert main(["history", "--records", str(records), "--figure", "70cm", "--plot", str(folder / "chart.png")]) == 0
    out = capsys.readouterr().out
    assert "check standard mismatch-2to1, 70cm mean |Γ|" in out and "baseline of 10 checks" in out
    statuses = [line.split()[-1] for line in out.splitlines() if line.strip()[:2].strip().isdigit()]
    assert statuses.count("baseline") == 10 and "OUT, failed: beyond the control limits" in out
    assert (folder / "chart.png").read_bytes().startswith(b"\x89PNG\r\n\x1a\n")
    # The title -- check standard, station, analyzer -- is drawn whole inside the figure.
    with ResultStore(records / "results.sqlite") as store:
        figure = control_chart_figure(load_chart(store, history_keys(store, figure="70cm")[0]))
    figure.canvas.draw()  # an Agg canvas: matplotlib gives its Figure one when drawn off screen
    title = figure.axes[0].title
    inside = figure.bbox
    assert title.get_text().count("\n") == 2 and "SIM0007 fw 0.9" in title.get_text()
    drawn = title.get_window_extent()
    assert inside.x0 <= drawn.x0 and drawn.x1 <= inside.x1 and drawn.y1 <= inside.y1
    assert main(["history", "--records", str(records), "--json"]) == 0
    charts = json.loads(capsys.readouterr().out)
    assert [c["figure"] for c in charts] == ["2m mean |Γ|", "70cm mean |Γ|"]
    assert all(c["baseline"]["count"] == 10 for c in charts)
    assert main(["history", "--records", str(records), "--check-standard", "none-such"]) == 3


def test_suspect_results_are_measured_again(drifted, capsys: pytest.CaptureFixture[str]) -> None:
    records, run_id = drifted["records"], drifted["run_id"]
    assert main(["run", "--remeasure-suspect", run_id, "--records", str(records)]) == 0
    with sqlite3.connect(records / "results.sqlite") as db:
        again, = db.execute("SELECT run_id FROM runs WHERE remeasure_of = ?", (run_id,)).fetchone()
    rows = device_rows(records / "results.sqlite", again)
    assert [r["serial"] for r in rows] == SERIALS[8:12] and not any(r["suspect"] for r in rows)
    assert _actually_off(records, again) == set()
    # The report of the first run says they were measured again, and how they came out.
    assert main(["report", run_id, "--records", str(records)]) == 0
    html = (records / "runs" / run_id / "report.html").read_text(encoding="utf-8")
    assert "All of them have been measured again" in html and "Measure them again with" not in html
    assert html.count(f"measured again in {again}") == 2 * 4  # in the verdicts and the suspect table
    capsys.readouterr()
    assert main(["run", "--remeasure-suspect", run_id, "--records", str(records)]) == 3
    assert "no suspect result left" in capsys.readouterr().err


def test_the_temperature_limit_makes_a_new_calibration_before_any_result_is_spoilt(tmp_path: Path) -> None:
    # The shipped sequence as it is: the analyzer reads 35 deg C before device 10, more than 1 K
    # from its calibration's 23 deg C, so the calibration is made again first.
    records = tmp_path / "rec"
    assert main(["run", str(SEQUENCE), "--records", str(records)]) == 0
    with sqlite3.connect(records / "results.sqlite") as db:
        run_id, = db.execute("SELECT run_id FROM runs").fetchone()
        used = [c for (c,) in db.execute("SELECT calibration_id FROM devices ORDER BY position")]
        temperatures = [t for (t,) in db.execute("SELECT temperature_c FROM calibrations ORDER BY created_utc")]
    assert used[:9] == [used[0]] * 9 and used[9:] == [used[9]] * 7 and used[0] != used[9]
    assert temperatures == pytest.approx([23.0, 35.0])
    assert _actually_off(records, run_id) == set() and not any(r["suspect"] for r in device_rows(
        records / "results.sqlite", run_id))


ATTENDED = {'connected_by = "simulated-operator"': 'connected_by = "operator"',
            '"TM150-0211", "TM150-0212",\n           "TM150-0213", "TM150-0214", "TM150-0215", "TM150-0216"]': "]"}
#: Enter at each prompt up to the one before device 10: the calibration's three standards, the
#: termination, three connections of the check standard; devices 1-4, a check, 5-8, a check, 9.
BEFORE_DEVICE_10 = 3 + 1 + 3 + 4 + 3 + 4 + 3 + 1


def test_an_attended_run_stops_at_a_prompt_when_the_calibration_no_longer_holds(tmp_path: Path) -> None:
    sequence = _variant(tmp_path, "attended.toml", ATTENDED)
    stopped = run_cli("run", str(sequence), "--records", "stop", cwd=tmp_path,
                      stdin="\n" * BEFORE_DEVICE_10 + "stop\n")
    assert stopped.returncode == 2 and "interrupted" in stopped.stderr
    assert ">>> The calibration no longer holds (the analyzer's temperature moved from 23.00 to 35.00" in stopped.stdout
    assert len(device_rows(tmp_path / "stop" / "results.sqlite")) == 9
    # Enter at that prompt: the person is asked for the standards again, then device 10.
    went_on = run_cli("run", str(sequence), "--records", "on", cwd=tmp_path, stdin="\n" * 40)
    assert went_on.returncode == 0, went_on.stdout[-2000:]
    assert went_on.stdout.count("Connect the open standard") == 2
    rows = device_rows(tmp_path / "on" / "results.sqlite")
    assert len(rows) == 10 and rows[8]["calibration_id"] != rows[9]["calibration_id"]


#: Sessions at the bench on days the room holds its temperature: 11 and 13 are the audit's
#: (before the chart took one point per calibration, 6-8 right results of each were marked
#: suspect); on 11 and 14 the precision chart warns (2 and 4 checks).
STABLE_SESSIONS = (11, 13, 14)
STABLE_DEVICES = 60


def _stable_variant(folder: Path, session: int) -> tuple[Path, Path]:
    """The shipped sequence on a copy of its bench whose room stays at 23 deg C, with sixty meter
    heads and a check after every one (the check standard measured 61 times with one
    calibration unless the chart asks for another)."""
    scenario = SCENARIO.read_text(encoding="utf-8").replace("[analyzer]\n", f"[analyzer]\nsession_seed = {session}\n")
    scenario, n = re.subn(r"temperature_profile = .*", "temperature_profile = [[0, 23.0], [100000, 23.0]]", scenario)
    assert n == 1 and "count = 16\n" in scenario
    scenario = scenario.replace("count = 16\n", f"count = {STABLE_DEVICES}\n")
    bench = folder / f"stable-{session}-bench.toml"
    bench.write_text(scenario, encoding="utf-8")
    serials = ", ".join(f'"TM150-{201 + i:04d}"' for i in range(STABLE_DEVICES))
    text = SEQUENCE.read_text(encoding="utf-8").replace('simulated_bench = "drifting-bench"',
                                                        f'simulated_bench = "{bench.name}"')
    text, n = re.subn(r"serials = \[[^\]]*\]", f"serials = [{serials}]", text)
    assert n == 1 and "every_devices = 4\n" in text
    sequence = folder / f"stable-{session}.toml"
    sequence.write_text(text.replace("every_devices = 4\n", "every_devices = 1\n"), encoding="utf-8")
    return sequence, bench


@pytest.fixture(scope="module")
def baseline(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Records holding the earlier sessions' checks: copy them for each batch, so that every
    batch meets the same chart."""
    folder = tmp_path_factory.mktemp("baseline")
    _earlier_sessions(folder, folder / "rec")
    return folder / "rec"


@pytest.fixture(scope="module")
def stable(baseline: Path, tmp_path_factory: pytest.TempPathFactory) -> dict[int, dict[str, object]]:
    """A long batch on each stable day, on its own copy of the baseline records."""
    folder = tmp_path_factory.mktemp("stable")
    runs = {}
    for session in STABLE_SESSIONS:
        records = folder / f"rec-{session}"
        shutil.copytree(baseline, records)
        sequence, bench = _stable_variant(folder, session)
        runs[session] = {**_run_json(sequence, records), "bench": bench}
    return runs


@pytest.mark.parametrize("session", STABLE_SESSIONS)
def test_a_stable_bench_checked_after_every_device_puts_no_right_result_in_doubt(stable, session: int) -> None:
    run = stable[session]
    records, run_id = run["records"], run["run_id"]
    assert run["code"] == 0  # every device passed, none suspect
    rows = device_rows(records / "results.sqlite", run_id)
    assert len(rows) == STABLE_DEVICES and not any(r["suspect"] for r in rows)
    assert not list((records / "runs" / run_id).glob("*.suspect.json"))
    # The truth: the bench does not drift, and every device reads right.
    assert _actually_off(records, run_id, run["bench"]) == set()
    with sqlite3.connect(records / "results.sqlite") as db:
        checks = db.execute("SELECT devices_before, passed, en, in_control, control_signals, calibration_id"
                            " FROM verifications WHERE run_id = ? ORDER BY verification_id", (run_id,)).fetchall()
        used = [c for (c,) in db.execute("SELECT calibration_id FROM devices WHERE run_id = ? ORDER BY position",
                                         (run_id,))]
    # No check fails: every one agrees with its reference and stays within its control limits.
    assert all(c[1] == 1 and c[2] <= 1 for c in checks)
    # The batch's first check completes the baseline; every later one is judged by the chart.
    assert checks[0][3] is None and all(c[3] is not None for c in checks[1:])
    # The run rules, judged on one point per calibration, stay quiet; what warns now and then
    # is the precision chart (a false alarm at its 1 % per band), and each warning has the
    # calibration made again before the next device -- the results measured with it stand.
    warnings = [c for c in checks if c[3] == 0]
    assert all(s.endswith("(precision chart)") for c in warnings for s in c[4].split("; "))
    warned_with = {c[5] for c in warnings if c[0] < STABLE_DEVICES}
    assert len(set(used)) == 1 + len(warned_with)
    for cal in warned_with:
        assert cal not in used[max(c[0] for c in checks if c[5] == cal):]
    told = [e for e in run["events"] if e["event"] == "verification"]
    assert len(told) == len(checks) and all(e["passed"] for e in told)
    assert [e["in_control"] for e in told[1:]] == [c[3] == 1 for c in checks[1:]]
    assert not [e for e in run["events"] if e["event"] == "suspect"]



def test_a_check_is_recorded_at_the_temperature_before_its_sweeps(tmp_path: Path) -> None:
    # The room warms by 1.5 K between the first and second sweep of the check after device 8
    # (its sweeps at 18, 19 and 20 min of the bench clock): the check is recorded at the 23.0 deg C
    # it set out to prove, the journal has both readings, and the 1 K limit has the calibration
    # made again before device 9.
    scenario = SCENARIO.read_text(encoding="utf-8")
    warming = "temperature_profile = [[0, 23.0], [1262, 23.0], [1318, 35.0]]"
    assert warming in scenario
    (tmp_path / "warming.toml").write_text(
        scenario.replace(warming, "temperature_profile = [[0, 23.0], [1100, 23.0], [1110, 24.5]]"), encoding="utf-8")
    sequence = _variant(tmp_path, "warming-seq.toml", {'simulated_bench = "drifting-bench"':
                                                       'simulated_bench = "warming.toml"'})
    records = tmp_path / "rec"
    assert main(["run", str(sequence), "--records", str(records)]) == 0
    with sqlite3.connect(records / "results.sqlite") as db:
        checks = db.execute("SELECT devices_before, temperature_c FROM verifications ORDER BY verification_id").fetchall()
        history = {t for (t,) in db.execute("SELECT temperature_c FROM check_history WHERE verification_id = 3")}
    assert checks == [(0, 23.0), (4, 23.0), (8, 23.0), (8, 24.5), (12, 24.5), (16, 24.5)] and history == {23.0}
    journal = next((records / "runs").glob("*/journal.jsonl")).read_text(encoding="utf-8").splitlines()
    verified = [json.loads(line) for line in journal if '"verified"' in line]
    assert [(v["temperature_before_c"], v["temperature_after_c"]) for v in verified][2] == (23.0, 24.5)


#: The check standard ageing: its resistance rises by this much a session (about half the chart's
#: calibration-to-calibration spread s2 of its 2 m figure, 1.2e-4 in |Γ|, at 4.4e-3 |Γ| per ohm).
AGEING_OHM_PER_SESSION = 0.0136


def _aged_session(folder: Path, index: int) -> tuple[Path, Path]:
    """A later day at the bench (room at 23 deg C): the check standard aged by ``index`` steps,
    three meter heads with a check after each."""
    scenario = SCENARIO.read_text(encoding="utf-8").replace("[analyzer]\n", f"[analyzer]\nsession_seed = {21 + index}\n")
    standard = 'description = "check standard: 2:1 mismatch (a 100-ohm termination)"\nresistance_ohm = 100.0'
    assert standard in scenario
    scenario = scenario.replace(standard, standard.replace("100.0", f"{100.0 + AGEING_OHM_PER_SESSION * index:.4f}"))
    scenario = re.sub(r"temperature_profile = .*", "temperature_profile = [[0, 23.0], [100000, 23.0]]", scenario)
    bench = folder / f"aged-{index}-bench.toml"
    bench.write_text(scenario, encoding="utf-8")
    text = SEQUENCE.read_text(encoding="utf-8").replace('simulated_bench = "drifting-bench"',
                                                        f'simulated_bench = "{bench.name}"')
    text = re.sub(r"serials = \[[^\]]*\]", f"serials = {json.dumps(SERIALS[:3])}", text)
    sequence = folder / f"aged-{index}.toml"
    sequence.write_text(text.replace("every_devices = 4\n", "every_devices = 1\n"), encoding="utf-8")
    return sequence, bench


def test_the_run_rules_catch_a_check_standard_ageing_before_it_leaves_the_limits(baseline: Path,
                                                                                  tmp_path: Path) -> None:
    # After the baseline's ten sessions, the check standard ages a little every day (the bench's
    # truth: its resistance 100 ohm + 0.0136 ohm a day); the analyzer and the devices do not
    # change.  A run rule warns days before any check leaves the limits: the calibration is made
    # again, and no result is put in doubt -- rightly, by the truth.  Days go on until a check
    # fails (at most twelve).
    records = tmp_path / "rec"
    shutil.copytree(baseline, records)
    days = []
    for index in range(1, 13):
        sequence, bench = _aged_session(tmp_path, index)
        run = _run_json(sequence, records)
        told = [e for e in run["events"] if e["event"] == "verification"]
        days.append({**run, "bench": bench, "warned": [e for e in told if e["passed"] and not e["in_control"]],
                     "failed": [e for e in told if not e["passed"]]})
        if days[-1]["failed"]:
            break
    failed = next(i for i, d in enumerate(days) if d["failed"])
    warned = next(i for i, d in enumerate(days) if d["warned"] or d["failed"])
    assert warned + 2 <= failed  # seen on day 4 (2 of 3 beyond 2 s2 at 2 m), the limits crossed on day 10
    first = days[warned]["warned"][0]["control_signals"]
    assert first and all("(Western Electric)" in s or "(Nelson test 3)" in s for s in first)
    assert "beyond the control limits" in " ".join(days[failed]["failed"][0]["control_signals"])
    # Every day before the failure completes (exit 0): a warning is followed by a new calibration,
    # no result is suspect, and every device reads right by the truth.
    for day in days[:failed]:
        assert day["code"] == 0 and not [e for e in day["events"] if e["event"] == "suspect"]
        assert _actually_off(records, day["run_id"], day["bench"]) == set()


def test_a_resumed_run_does_not_keep_a_calibration_whose_last_check_warned(baseline: Path, tmp_path: Path) -> None:
    # The ageing check standard's day 4, attended: its first check warns (2 of 3 beyond 2 s2),
    # the person is asked for the standards and types stop.  Resumed, the run calibrates again
    # rather than keep the calibration the chart has doubts about.
    records = tmp_path / "rec"
    shutil.copytree(baseline, records)
    for index in (1, 2, 3):
        assert _run_json(_aged_session(tmp_path, index)[0], records)["code"] == 0
    sequence, _ = _aged_session(tmp_path, 4)
    sequence.write_text(sequence.read_text(encoding="utf-8").replace('connected_by = "simulated-operator"',
                                                                     'connected_by = "operator"'), encoding="utf-8")
    # Enter for the three standards, the termination and the check's three connections, then stop.
    stopped = run_cli("run", str(sequence), "--records", str(records), cwd=tmp_path, stdin="\n" * 7 + "stop\n")
    assert stopped.returncode == 2 and "passed, but out of statistical control" in stopped.stdout
    assert ">>> The calibration no longer holds (its last check was out of statistical control" in stopped.stdout
    with sqlite3.connect(records / "results.sqlite") as db:
        run_id, = db.execute("SELECT run_id FROM runs ORDER BY rowid DESC LIMIT 1").fetchone()
    resumed = run_cli("run", "--resume", run_id, "--records", str(records), cwd=tmp_path, stdin="\n" * 40)
    assert resumed.returncode == 0, resumed.stdout[-2000:]
    assert "the calibration cannot be kept (its last check-standard verification failed or was out of statistical" \
           " control): calibrating again" in resumed.stdout
    with sqlite3.connect(records / "results.sqlite") as db:
        made = db.execute("SELECT count(*) FROM calibrations WHERE run_id = ?", (run_id,)).fetchone()[0]
    assert made == 2 and len(device_rows(records / "results.sqlite", run_id)) == 3
