"""Sequence files: every problem found at once, each with file, line, key and fix; nothing evaluated."""

from __future__ import annotations

from pathlib import Path

import pytest

from lineproof.sequence import SequenceProblems, load_sequence
from lineproof.toml_problems import KeyLines

SCENARIOS = Path(__file__).parent.parent / "scenarios"

GOOD = f"""\
[sequence]
name = "unit test sequence"

[station]
name = "test bench"
simulated_bench = "{SCENARIOS / 'batch-bench.toml'}"
connected_by = "simulated-operator"

[station.analyzer]
profile = "generic-scpi-reflectometer"

[sweep]
start_hz = 100e6
stop_hz = 500e6
points = 201

[[band]]
name = "2m"
start_hz = 144e6
stop_hz = 148e6
max_vswr = 1.10

[[band]]
name = "70cm"
start_hz = 420e6
stop_hz = 450e6
max_vswr = 1.20

[calibration]
kit = "kits/n50-illustrative.toml"

[termination]
name = "good-termination"

[check_standard]
name = "check-75"
reference_vswr = 1.5
tolerance = 0.01

[devices]
model = "TM-150 inline meter head"
serials = ["TM150-0001", "TM150-0002"]

[[step]]
do = "calibrate"

[[step]]
do = "qualify-termination"

[[step]]
do = "verify"

[[step]]
do = "measure-batch"
"""


def write(tmp_path: Path, text: str, name: str = "sequence.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def problems_of(tmp_path: Path, text: str) -> list:
    with pytest.raises(SequenceProblems) as caught:
        load_sequence(write(tmp_path, text))
    return caught.value.problems


def line_of(text: str, fragment: str) -> int:
    return next(number for number, line in enumerate(text.splitlines(), 1) if fragment in line)


def test_a_good_sequence_loads_with_its_hash(tmp_path: Path) -> None:
    spec = load_sequence(write(tmp_path, GOOD))
    assert spec.name == "unit test sequence"
    assert [s.action for s in spec.steps] == ["calibrate", "qualify-termination", "verify", "measure-batch"]
    assert [b.name for b in spec.bands] == ["2m", "70cm"] and spec.bands[0].max_vswr == 1.10
    assert spec.plan.points == 201 and spec.station.connected_by == "simulated-operator"
    assert spec.termination is not None and spec.termination.max_vswr == 1.05  # the common-practice default
    import hashlib

    assert spec.sha256 == hashlib.sha256(GOOD.encode()).hexdigest()


def test_every_problem_is_reported_with_its_line_key_and_fix(tmp_path: Path) -> None:
    text = (GOOD.replace("points = 201", "points = 201\ncolour = \"blue\"")
            .replace("max_vswr = 1.20", "max_vswr = 0.9")
            .replace('do = "verify"', 'do = "verfiy"')
            .replace('"TM150-0002"]', '"../../x", "' + "Q" * 300 + '"]'))
    found = problems_of(tmp_path, text)
    by_key = {p.key: p for p in found}
    assert by_key["sweep.colour"].line == line_of(text, "colour")
    assert "unknown key" in by_key["sweep.colour"].problem
    assert by_key["band[2].max_vswr"].line == line_of(text, "max_vswr = 0.9")
    assert "greater than 1" in by_key["band[2].max_vswr"].problem
    assert by_key["step[3].do"].line == line_of(text, '"verfiy"')
    assert "verify" in by_key["step[3].do"].fix
    traversal = by_key["devices.serials[2]"]
    assert "../../x" in traversal.problem and traversal.line == line_of(text, "../../x")
    junk = by_key["devices.serials[3]"]
    assert "300 characters" in junk.problem and len(str(junk)) < 400
    assert all(p.fix for p in found) and all(p.path == str(tmp_path / "sequence.toml") for p in found)


def test_capabilities_are_checked_before_any_instrument(tmp_path: Path) -> None:
    # generic-scpi-reflectometer: 1 MHz - 3 GHz, 10001 points per sweep, one port (its profile file)
    text = (GOOD.replace("stop_hz = 500e6", "stop_hz = 3.5e9", 1).replace("points = 201", "points = 20001")
            .replace('kit = "kits/', 'method = "solt"\nkit = "kits/')
            .replace("start_hz = 420e6\nstop_hz = 450e6", "start_hz = 3.2e9\nstop_hz = 3.3e9"))
    found = problems_of(tmp_path, text)
    messages = {p.key: p.problem for p in found}
    assert "above the analyzer's range" in messages["sweep.stop_hz"]
    assert "at most 10001 per sweep" in messages["sweep.points"]
    assert "allow_segments" in next(p.fix for p in found if p.key == "sweep.points")
    assert "outside the analyzer's range" in messages["band[2].start_hz"]
    assert "cannot do a solt calibration" in messages["calibration.method"]


def test_segments_are_allowed_when_asked(tmp_path: Path) -> None:
    spec = load_sequence(write(tmp_path, GOOD.replace("points = 201", "points = 12001\nallow_segments = true")))
    assert spec.plan.points == 12001 and spec.allow_segments


def test_syntax_errors_name_their_line(tmp_path: Path) -> None:
    text = GOOD.replace('name = "test bench"', 'name = "test bench')
    found = problems_of(tmp_path, text)
    assert len(found) == 1 and found[0].line == line_of(text, 'name = "test bench')
    assert "not valid TOML" in found[0].problem


def test_references_to_missing_objects_kits_and_steps_out_of_order(tmp_path: Path) -> None:
    text = (GOOD.replace('name = "good-termination"', 'name = "no-such-load"')
            .replace('"kits/n50-illustrative.toml"', '"kits/missing.toml"')
            .replace('[[step]]\ndo = "calibrate"\n\n', ""))
    found = problems_of(tmp_path, text)
    problems = " | ".join(str(p) for p in found)
    assert "has no object 'no-such-load'" in problems
    assert "kits/missing.toml" in problems and "not found" in problems
    assert "comes before any calibrate step" in problems


def test_a_scanned_batch_needs_a_person(tmp_path: Path) -> None:
    text = GOOD.replace('serials = ["TM150-0001", "TM150-0002"]', 'entry = "scanned"')
    found = problems_of(tmp_path, text)
    assert any(p.key == "devices.entry" and "nobody is there" in p.problem for p in found)


def test_nothing_is_evaluated(tmp_path: Path) -> None:
    text = GOOD.replace("points = 201", 'points = "__import__(\'os\').system(\'touch pwned\')"')
    found = problems_of(tmp_path, text)
    assert any(p.key == "sweep.points" and "whole number" in p.problem for p in found)
    assert not (tmp_path / "pwned").exists() and not Path("pwned").exists()


def test_key_lines_follow_tables_arrays_and_multiline_values() -> None:
    text = '''\
# comment
[a]
x = 1
"quoted key" = """
line = 5 inside a string
"""
list = [
  "one",   # first
  { k = 2 },
  [3, 4],
]

[[b]]
y = 2
[b.c]
z = 3

[[b]]
y = 4
dotted.key = 5
'''
    lines = KeyLines(text)
    assert lines.line_of("a.x") == 3
    assert lines.line_of("a.quoted key") == 4
    assert lines.line_of("a.line") == 2  # not a key: falls back to its table
    assert lines.line_of("a.list") == 7
    assert [lines.line_of(f"a.list[{i}]") for i in (1, 2, 3)] == [8, 9, 10]
    assert lines.line_of("a.list[2].k") == 9
    assert lines.line_of("b[1].y") == 14 and lines.line_of("b[1].c.z") == 16
    assert lines.line_of("b[2].y") == 19 and lines.line_of("b[2].dotted.key") == 20
    assert lines.line_of("nothing.here") is None


def test_a_stored_calibration_is_named_as_lineproof_names_it(tmp_path: Path) -> None:
    reuse = 'kit = "kits/n50-illustrative.toml"\nreuse = "latest"\nmax_interpolation_error = 2e-3'
    spec = load_sequence(write(tmp_path, GOOD.replace('kit = "kits/n50-illustrative.toml"', reuse)))
    assert spec.calibration is not None and spec.calibration.reuse == "latest"
    assert spec.calibration.max_interpolation_error == 2e-3
    named = GOOD.replace('kit = "kits/n50-illustrative.toml"',
                         'kit = "kits/n50-illustrative.toml"\nreuse = "cal-20260101T120000Z-1a2b3c"')
    assert load_sequence(write(tmp_path, named)).calibration.reuse == "cal-20260101T120000Z-1a2b3c"
    text = GOOD.replace('kit = "kits/n50-illustrative.toml"', 'kit = "kits/n50-illustrative.toml"\nreuse = "newest"')
    (found,) = problems_of(tmp_path, text)
    assert found.key == "calibration.reuse" and found.line == line_of(text, 'reuse = "newest"')
    assert "'newest' names no stored calibration" in found.problem and 'reuse = "latest"' in found.fix
    # the calibrate step is where a stored calibration is loaded
    text = GOOD.replace('kit = "kits/n50-illustrative.toml"', reuse).replace(
        '[[step]]\ndo = "calibrate"\n\n[[step]]\ndo = "qualify-termination"\n\n[[step]]\ndo = "verify"\n\n'
        '[[step]]\ndo = "measure-batch"\n', '[[step]]\ndo = "message"\ntext = "nothing to do"\n')
    by_key = {p.key: p for p in problems_of(tmp_path, text)}
    assert "loaded by the calibrate step, and this sequence has none" in by_key["calibration.reuse"].problem


def test_markers_are_named_and_lie_in_the_sweep(tmp_path: Path) -> None:
    marker = '[[marker]]\nname = "{}"\nfrequency_hz = {}\n\n[calibration]'
    two = marker.format("f0", "146e6").replace("\n\n[calibration]", "\n\n") + marker.format("f1", "435e6")
    spec = load_sequence(write(tmp_path, GOOD.replace("[calibration]", two)))
    assert spec.marker_frequencies == {"f0": 146e6, "f1": 435e6}
    text = GOOD.replace("[calibration]", marker.format("f0", "146e6").replace("\n\n[calibration]", "\n\n")
                        + marker.format("F 0", "600e6").replace("\n\n[calibration]", "\n\n")
                        + marker.format("f0", "146e6"))
    by_key = {p.key: p for p in problems_of(tmp_path, text)}
    assert "marker name 'F 0' is not allowed" in by_key["marker[2].name"].problem
    assert "marker at 600 MHz lies outside the sweep (100-500 MHz" in by_key["marker[2].frequency_hz"].problem
    assert by_key["marker[2].frequency_hz"].line == line_of(text, "600e6")
    assert "defined twice" in by_key["marker[3].name"].problem


def test_the_results_database_a_sequence_names_is_checked_read_only(tmp_path: Path) -> None:
    # `lineproof run` would refuse each of these only after opening the station; check says so first.
    import sqlite3

    from lineproof.store import ResultStore

    url = problems_of(tmp_path, GOOD + '\n[records]\ndatabase = "postgresql://u@h/db"\n')
    assert [(p.key, p.line) for p in url] == [("records.database", GOOD.count("\n") + 3)]
    assert "PostgreSQL" in url[0].problem and url[0].path == str(tmp_path / "sequence.toml") and url[0].fix

    stranger = tmp_path / "passwd"
    stranger.write_text("root:x:0:0:root:/root:/bin/sh\n")
    named = problems_of(tmp_path, GOOD + f'\n[records]\ndatabase = "{stranger}"\n')
    assert [p.key for p in named] == ["records.database"] and "not an SQLite database" in named[0].problem
    assert str(stranger) in named[0].problem and stranger.read_text() == "root:x:0:0:root:/root:/bin/sh\n"

    (tmp_path / "rec").mkdir()
    with sqlite3.connect(tmp_path / "rec" / "results.sqlite") as db:
        db.execute("CREATE TABLE stock (part TEXT)")
    text = GOOD + '\n[records]\nfolder = "rec"\n'
    in_folder = problems_of(tmp_path, text)
    assert [(p.key, p.line) for p in in_folder] == [("records.folder", line_of(text, 'folder = "rec"'))]
    assert "not one lineproof created" in in_folder[0].problem

    (tmp_path / "rec" / "results.sqlite").unlink()
    ResultStore(tmp_path / "rec" / "results.sqlite").close()  # ours: the run may use it
    assert load_sequence(write(tmp_path, text)).records_folder == "rec"
    assert load_sequence(write(tmp_path, GOOD + '\n[records]\ndatabase = "new.sqlite"\n')).database == "new.sqlite"


def test_a_station_files_problems_name_its_own_lines_and_tables(tmp_path: Path) -> None:
    # The analyzer's port is judged against its profile after the station file is read: the
    # problem still carries the station file's line, and a fix names the table as that file writes it.
    station = write(tmp_path, f'name = "bench B"\nsimulated_bench = "{SCENARIOS / "batch-bench.toml"}"\n'
                    'connected_by = "simulated-operator"\n\n[analyzer]\nprofile = "generic-scpi-reflectometer"\n'
                    "port = 2\n", "station.toml")
    with pytest.raises(SequenceProblems) as caught:
        load_sequence(write(tmp_path, GOOD), station)
    [port] = caught.value.problems  # once: not again as a parameter the one-port calibration lacks
    assert (port.path, port.key, port.line) == (str(station), "analyzer.port", 7)
    assert "the analyzer has 1 port(s)" in port.problem and port.fix == "use a port from 1 to 1"

    station.write_text(station.read_text().replace('"simulated-operator"', '"switch"').replace("port = 2\n", ""))
    with pytest.raises(SequenceProblems) as caught:
        load_sequence(tmp_path / "sequence.toml", station)
    [switch] = caught.value.problems
    assert (switch.key, switch.line) == ("connected_by", 3)
    assert switch.fix.startswith("add a [switch] table")  # in a station file; [station.switch] in a sequence

    in_sequence = problems_of(tmp_path, GOOD.replace('connected_by = "simulated-operator"', 'connected_by = "switch"'))
    [switch] = [p for p in in_sequence if p.key == "station.connected_by"]
    assert switch.fix.startswith("add a [station.switch] table") and switch.line == line_of(GOOD, "connected_by")


def _check_json(path: Path, capsys: pytest.CaptureFixture[str]) -> list[dict]:
    import json

    from lineproof.cli import main

    assert main(["check", str(path), "--json"]) == 3
    return json.loads(capsys.readouterr().out)["problems"]


def test_check_names_the_scenario_file_its_key_and_line_and_the_key_that_named_it(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    bench_text = (SCENARIOS / "batch-bench.toml").read_text(encoding="utf-8").replace(
        "time_scale = 0.1", 'time_scale = 0.1\ncolour = "blue"')
    bench = write(tmp_path, bench_text, "bench.toml")
    sequence = write(tmp_path, GOOD.replace(str(SCENARIOS / "batch-bench.toml"), str(bench)))
    found = _check_json(sequence, capsys)
    in_bench = [p for p in found if p["file"] == str(bench)]
    assert len(in_bench) == 1 and in_bench[0]["key"] == "bench.colour"
    assert in_bench[0]["line"] == line_of(bench_text, "colour") and in_bench[0]["fix"]
    pointer = [p for p in found if p["file"] == str(sequence)]
    assert [(p["key"], p["line"]) for p in pointer] == [("station.simulated_bench", line_of(GOOD, "simulated_bench"))]
    assert str(bench) in pointer[0]["problem"] and "scenario" in pointer[0]["problem"]


def test_check_lists_every_problem_of_a_profile_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    profile_text = ('[profile]\nname = "mine"\nkind = "analyzer"\nbased_on = "generic-scpi-reflectometer"\n'
                    '[capabilities]\nmax_points = "many"\nfoo = 1\n')
    profile = write(tmp_path, profile_text, "mine.toml")
    sequence = write(tmp_path, GOOD.replace('profile = "generic-scpi-reflectometer"', f'profile = "{profile}"'))
    found = _check_json(sequence, capsys)
    assert {(p["key"], p["line"]) for p in found if p["file"] == str(profile)} == {
        ("capabilities.max_points", line_of(profile_text, "max_points")), ("capabilities.foo", line_of(profile_text, "foo"))}
    assert any(p["file"] == str(sequence) and p["key"] == "station.analyzer.profile" for p in found)
