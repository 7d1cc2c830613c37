"""Two-port sequences checked before any instrument is touched: the method the harness picks
and why, the routes a switch needs for it, the figures against the bands' limits; and how a
switch station routes a two-port run's connections."""

from __future__ import annotations

from collections.abc import Sequence
from importlib import resources
from pathlib import Path

import pytest

from lineproof.errors import InputError
from lineproof.operators import SwitchOperator
from lineproof.sequence import SequenceProblems, load_sequence
from lineproof.values import InstrumentIdentity

SHIPPED = Path(str(resources.files("lineproof.sequences")))
EXAMPLE = (SHIPPED / "two-port-batch.toml").read_text(encoding="utf-8").replace(
    '"profiles/tarnmoor-x24-switch.toml"', f'"{(SHIPPED / "profiles" / "tarnmoor-x24-switch.toml").as_posix()}"')
PORT2 = '[station.switch.wiring_port2]\nopen = "2!1"\nshort = "2!2"\nload = "2!3"\n'


def variant(tmp_path: Path, replace: dict[str, str]) -> Path:
    text = EXAMPLE
    for old, new in replace.items():
        assert old in text, old
        text = text.replace(old, new)
    path = tmp_path / "sequence.toml"
    path.write_text(text, encoding="utf-8")
    return path


def problems(tmp_path: Path, replace: dict[str, str]) -> dict[str, list[InputError]]:
    with pytest.raises(SequenceProblems) as caught:
        load_sequence(variant(tmp_path, replace))
    found: dict[str, list[InputError]] = {}
    for problem in caught.value.problems:
        found.setdefault(str(problem.key), []).append(problem)
    return found


def test_the_best_method_is_chosen_and_the_reason_kept(tmp_path: Path) -> None:
    spec = load_sequence(variant(tmp_path, {}))
    assert spec.calibration is not None and spec.calibration.method == "solt"
    assert spec.calibration.chosen == "the best the analyzer (full paths) allows"
    # without port 2's standards on the switch SOLT cannot be done here, nor one-path (the switch
    # cannot turn a device round): with the slots wired to port 1, the batch is one-port, as-terminated
    port1_slots = "".join(f'slot-{k:02d} = "1!{8 + k}"\n' for k in range(1, 13))
    spec = load_sequence(variant(tmp_path, {PORT2: "", 'mismatch-2to1 = "1!6"\n': f'mismatch-2to1 = "1!6"\n{port1_slots}',
                                            'judge = ["as-terminated", "insertion-loss"]': ""}))
    assert spec.calibration is not None and spec.calibration.method == "one-port"
    assert "solt: the switch has no route for the open standard at port 2" in spec.calibration.chosen
    assert "one-path: the switch has no route for TM150-0101 turned round" in spec.calibration.chosen
    # when the station can do none, the best the analyzer allows is kept and its problems listed
    found = problems(tmp_path, {PORT2: ""})
    assert len(found["station.switch.wiring_port2"]) == 3


def test_a_method_named_needs_its_routes(tmp_path: Path) -> None:
    found = problems(tmp_path, {PORT2: "", 'method = "best"': 'method = "solt"'})
    missing = found["station.switch.wiring_port2"]
    assert len(missing) == 3 and "the open standard at port 2 ('open')" in missing[0].problem
    assert 'add open = "<channel>" to [station.switch.wiring_port2]' in missing[0].fix
    found = problems(tmp_path, {'method = "best"': 'method = "one-path"'})
    turned = found["station.switch.wiring_between_ports_reversed"]
    assert len(turned) == 12 and "TM150-0101 turned round" in turned[0].problem
    assert 'connected_by = "operator"' in turned[0].fix
    found = problems(tmp_path, {'as_terminated = "computed"': 'as_terminated = "measured"'})
    assert len(found["station.switch.wiring"]) == 12  # each slot with its output on the termination


def test_methods_the_run_or_the_analyzer_cannot_do(tmp_path: Path) -> None:
    found = problems(tmp_path, {'method = "best"': 'method = "thru-response"'})
    limit = found["band[1].max_vswr"][0]
    assert limit.problem == "band 2m limits reflection, and a thru-response calibration measures transmission only"
    assert limit.fix == 'remove max_vswr from the band, or calibrate with method = "solt" or "one-path", which ' \
        "measure the match too"
    assert "it cannot judge as-terminated" in found["measurement.judge"][0].problem
    assert "it cannot qualify a termination" in found["step[2].do"][0].problem
    assert "cannot read the check standard's reflection" in found["step[3].do"][0].problem
    assert "cannot read the check standard's reflection" in found["reverify"][0].problem
    assert "add raw_source_match_db and raw_load_match_db" in found["station.uncertainty"][0].fix
    found = problems(tmp_path, {'method = "best"': 'method = "solt"', "port = 1 ": "port = 2 "})
    assert "from port 1 (its input) to port 2" in found["station.analyzer.port"][0].problem
    reflectometer = {'profile = "generic-scpi-analyzer"': 'profile = "generic-scpi-reflectometer"'}
    found = problems(tmp_path, {**reflectometer, 'method = "best"': 'method = "solt"'})
    assert "cannot do a solt calibration" in found["calibration.method"][0].problem
    # asked for nothing in particular, a reflectometer calibrates one port, and then judging
    # insertion loss is impossible
    found = problems(tmp_path, reflectometer)
    assert "need(s) full S-parameters" in found["measurement.judge"][0].problem


def test_figures_against_the_bands_limits(tmp_path: Path) -> None:
    no_loss_limits = {"max_insertion_loss_db = 0.1\n": ""}
    found = problems(tmp_path, no_loss_limits)
    assert "insertion-loss is judged, but no band sets a limit for it" in found["measurement.judge"][0].problem
    # unstated, the default judges insertion loss only where a band limits it
    spec = load_sequence(variant(tmp_path, {**no_loss_limits, 'judge = ["as-terminated", "insertion-loss"]': ""}))
    assert spec.measurement.judge is None
    found = problems(tmp_path, {'judge = ["as-terminated", "insertion-loss"]': 'judge = ["insertion-loss"]',
                                "max_vswr = 1.10\nmax_insertion_loss_db = 0.1\n": "max_vswr = 1.10\n"})
    assert "band 2m limits none of the judged figures (insertion-loss)" in found["band[1]"][0].problem
    found = problems(tmp_path, {'judge = ["as-terminated", "insertion-loss"]': 'judge = ["s11", "s11"]',
                                'as_terminated = "computed"': 'as_terminated = "guessed"'})
    assert "must list figures once each" in found["measurement.judge"][0].problem
    assert "use one of: computed, measured" in found["measurement.as_terminated"][0].fix


#: two-port-batch.toml judging insertion loss alone (no match limits) ...
LOSS_ONLY = {'judge = ["as-terminated", "insertion-loss"]': 'judge = ["insertion-loss"]',
             "max_vswr = 1.10\n": "", "max_vswr = 1.20\n": ""}
#: ... and reading no reflection either (a transmission-only check), the analyzer's raw match stated.
TRANSMISSION_ONLY = {
    **LOSS_ONLY,
    "switch_path_mismatch = 0.001 ": "raw_source_match_db = 18.0\nraw_load_match_db = 18.0\nswitch_path_mismatch = 0.001 ",
    '[[step]]\ndo = "qualify-termination"\n': "", '[[step]]\ndo = "verify"\n': "",
    "[reverify]\nevery_devices = 6\nat_end = true\n": "",
}


def test_a_transmission_only_check_gets_the_best_method_that_can_do_it(tmp_path: Path) -> None:
    spec = load_sequence(variant(tmp_path, TRANSMISSION_ONLY))
    assert spec.calibration is not None and spec.calibration.method == "solt"  # it corrects the mismatch too
    # without port 2's standards SOLT cannot be done, nor one-path (no route turns a device round):
    # a thru response can, and lineproof says why it chose it; one-port never (no transmission)
    spec = load_sequence(variant(tmp_path, {**TRANSMISSION_ONLY, PORT2: ""}))
    assert spec.calibration is not None and spec.calibration.method == "thru-response"
    assert spec.calibration.chosen == ("the best the analyzer (full paths) allows that this station can do (solt: "
                                       "the switch has no route for the open standard at port 2; one-path: the "
                                       "switch has no route for TM150-0101 turned round (its output on port 1))")
    # a check that reads reflection too (it qualifies a termination, verifies with a check
    # standard) never falls back on a thru response
    found = problems(tmp_path, {**LOSS_ONLY, PORT2: ""})
    assert len(found["station.switch.wiring_port2"]) == 3 and "which a solt run needs" in \
        found["station.switch.wiring_port2"][0].problem


def test_a_thru_response_check_needs_its_statements(tmp_path: Path) -> None:
    thru = {**TRANSMISSION_ONLY, 'method = "best"': 'method = "thru-response"'}
    spec = load_sequence(variant(tmp_path, {**thru, 'as_terminated = "computed"': "device_max_vswr = 1.2"}))
    assert spec.measurement.device_max_vswr == 1.2
    found = problems(tmp_path, {**thru, "raw_source_match_db = 18.0\n": ""})
    assert "does not state them" in found["station.uncertainty"][0].problem
    found = problems(tmp_path, {**TRANSMISSION_ONLY, 'as_terminated = "computed"': "device_max_vswr = 1.2"})
    assert "a solt calibration measures the devices' match" in found["measurement.device_max_vswr"][0].problem
    found = problems(tmp_path, {**thru, 'as_terminated = "computed"': "device_max_vswr = 0.9"})
    assert "must be greater than 1" in found["measurement.device_max_vswr"][0].problem


def test_a_band_may_limit_insertion_loss_alone(tmp_path: Path) -> None:
    spec = load_sequence(variant(tmp_path, {"max_vswr = 1.10\n": ""}))
    assert spec.bands[0].max_vswr == float("inf") and spec.bands[0].max_insertion_loss_db == 0.1
    found = problems(tmp_path, {"max_vswr = 1.10\nmax_insertion_loss_db = 0.1\n": ""})
    assert found["band[1].max_vswr"][0].problem == "the band has no limit"


class RecordingSwitch:
    """Keeps what it was asked to route (a switch as the harness sees it; no instrument)."""

    def __init__(self) -> None:
        self.routes: list[list[str]] = []

    def identify(self) -> InstrumentIdentity:
        return InstrumentIdentity("test", "switch", "0", "0")

    def route(self, channels: Sequence[str]) -> None:
        self.routes.append(sorted(channels))

    def close(self) -> None:
        pass


def test_a_switch_routes_each_connection_and_keeps_the_other_port() -> None:
    switch = RecordingSwitch()
    operator = SwitchOperator(switch, {"open": ["1!1"], "slot-01": ["1!9"]}, {"TM150-0101": "slot-01"},
                              {"wiring_port2": {"open": ("2!1",)}, "wiring_between_ports": {"thru": ("1!4",),
                               "slot-01": ("2!9",)}, "wiring_between_ports_reversed": {"slot-01": ("2!21",)}})
    operator.connect(1, "open", None, "port 1's open")
    operator.connect(2, "open", None, "port 2's open")  # port 1's stays: both are swept at once
    operator.connect(1, "thru", "port:2", "the thru")  # holds both ports
    operator.connect(1, "TM150-0101", "port:2", "a device between the ports")
    operator.connect(1, "TM150-0101", "port:2", "turned round", reversed=True)
    operator.connect(1, "TM150-0101", "good-termination", "on the termination")
    assert switch.routes == [["1!1"], ["1!1", "2!1"], ["1!4"], ["2!9"], ["2!21"], ["1!9"]]
    with pytest.raises(InputError) as caught:
        operator.connect(2, "short", None, "port 2's short")
    assert caught.value.key == "station.switch.wiring_port2"
