"""Bad calibration input refused before it can calibrate wrongly, each refusal naming the
place (frequency, kit file, key, line, standards) and the fix: standards that do not separate
the error terms (at a solve, and found by ``lineproof check`` from the kit and the sweep
alone) and standards swept on another grid."""

from __future__ import annotations

import re
from collections.abc import Sequence
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from lineproof import calibration, steps, two_port_steps
from lineproof.calkit import load_kit
from lineproof.errors import CalibrationError
from lineproof.sequence import SequenceProblems, load_sequence
from lineproof.values import InstrumentIdentity, MeasuredSweep, SweepPlan

#: 1-3 GHz in 10 MHz steps: 2500 MHz is a point of the grid.
GRID = SweepPlan(1e9, 3e9, 201).frequencies()
#: A short 100 ps (one way) behind the open's plane turns its -1 round by 2 x 2π f 100 ps:
#: at f = 1 / (4 x 100 ps) = 2500 MHz it reflects +1, exactly as the open (a half-wave
#: offset short is an open; the textbook reason offset standards serve a limited band).
COINCIDENCE_HZ = 2.5e9
OFFSET_S = 100e-12


def terms(n: int) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(31)
    phase = np.exp(1j * rng.uniform(0, 2 * np.pi, (3, n)))
    return {"directivity": 0.05 * phase[0], "source_match": 0.12 * phase[1], "reflection_tracking": 0.85 * phase[2]}


def embed(t: dict[str, np.ndarray], gamma: np.ndarray) -> np.ndarray:
    return calibration.embed_reflection(t["directivity"], t["source_match"], t["reflection_tracking"], gamma)


def flush_open_short_load(f: np.ndarray, short_offset_s: float = 0.0) -> dict[str, np.ndarray]:
    return {"open": np.ones(f.size, complex), "short": -np.exp(-4j * np.pi * f * short_offset_s),
            "load": np.zeros(f.size, complex)}


def test_standards_alike_at_one_frequency_are_named_with_the_frequency_kit_file_and_fix() -> None:
    ideals = flush_open_short_load(GRID, OFFSET_S)
    assert abs(ideals["short"][150] - ideals["open"][150]) < 1e-12 and GRID[150] == COINCIDENCE_HZ
    measured = {name: embed(terms(GRID.size), value) for name, value in ideals.items()}
    with pytest.raises(CalibrationError) as caught:
        calibration.solve_one_port(GRID, measured, ideals, kit_source="kits/my-kit.toml")
    message = str(caught.value)
    assert "do not separate the error terms at 2500 MHz" in message
    assert re.search(r"the models of the open and the short are alike there \(\d(\.\d)?e-1[4-7] apart\)", message)
    assert "(kit file kits/my-kit.toml)" in message
    assert "fix: sweep clear of 2500 MHz" in message and "define it so in the kit file kits/my-kit.toml" in message
    assert "point" not in message.split("--")[0]  # the old message named "point 150", which nobody can find


def test_a_standard_connected_in_place_of_another_is_named_as_a_connection_problem() -> None:
    # The models differ (open +1, short -1) but the open was connected when the short was asked:
    # the two raw readings are the same, which no error box can do to different reflections.
    ideals = flush_open_short_load(GRID)
    raw = {name: embed(terms(GRID.size), value) for name, value in ideals.items()}
    raw["short"] = raw["open"].copy()
    with pytest.raises(CalibrationError) as caught:
        calibration.solve_one_port(GRID, raw, ideals)
    message = str(caught.value)
    assert "the open and the short read alike there (0 apart) though their models differ" in message
    assert "fix: connect the open and the short again, each when asked" in message
    assert "201 points from 1000 MHz to 3000 MHz" in message


def test_a_standard_swept_on_a_shifted_grid_of_the_same_length_is_refused() -> None:
    # Before: only the number of points was compared, so a grid 1 kHz off passed.
    ideals = flush_open_short_load(GRID)
    measured = {name: embed(terms(GRID.size), value) for name, value in ideals.items()}
    grids = {"open": GRID, "short": GRID, "load": GRID + 1e3}
    with pytest.raises(CalibrationError) as caught:
        calibration.solve_one_port(GRID, measured, ideals, grids=grids)
    message = str(caught.value)
    assert message.startswith("standard load was measured on a different grid from the calibration's (201 of 201 "
                              "frequencies differ, the first at point 1: 1000001000 Hz against")
    assert message.endswith("measure every standard with the same sweep plan")
    # within the relative tolerance (1e-9) a grid is the same grid: a readback rounded to 1e-12
    grids["load"] = GRID * (1 + 1e-12)
    solved = calibration.solve_one_port(GRID, measured, ideals, grids=grids)
    np.testing.assert_allclose(solved["directivity"], terms(GRID.size)["directivity"], atol=1e-12)
    grids["load"] = GRID[:-1]
    with pytest.raises(CalibrationError, match=r"standard load .*\(200 points, the calibration grid has 201\)"):
        calibration.solve_one_port(GRID, measured, ideals, grids=grids)


KIT = """\
[kit]
name = "coincident offsets"
reference_impedance_ohm = 50.0

[standards.open]
kind = "open"

[standards.short]
kind = "short"
offset_delay_s = {delay}

[standards.load]
kind = "load"

[standards.thru]
kind = "thru"
"""


def test_kit_whose_standards_coincide_in_the_sweep_is_found_before_measuring(tmp_path: Path) -> None:
    path = tmp_path / "kit.toml"
    path.write_text(KIT.format(delay=OFFSET_S))
    kit = load_kit(path)
    found = calibration.check_kit_for_sweep(kit, GRID, ("open", "short", "load"))
    assert len(found) == 1
    problem = found[0]
    assert (problem.path, problem.key, problem.line) == (str(path), "standards.short", 8)
    assert "over this sweep the standards do not separate the error terms at 2500 MHz" in problem.problem
    assert "the models of the open and the short are alike" in problem.problem
    assert problem.fix is not None and problem.fix.startswith("sweep clear of 2500 MHz")
    # the same kit over a sweep that stays below the coincidence, and the shipped kits over 1 MHz - 26.5 GHz
    assert calibration.check_kit_for_sweep(kit, SweepPlan(1e9, 2e9, 201).frequencies(), ("open", "short", "load")) == []
    wide = SweepPlan(1e6, 26.5e9, 2001).frequencies()
    for name in ("kits/n50-illustrative.toml", "kits/sma50-illustrative.toml", "kits/n75-illustrative.toml"):
        assert calibration.check_kit_for_sweep(load_kit(name), wide, ("open", "short", "load", "thru")) == []


SEQUENCE = """\
[sequence]
name = "kit check"

[station]
name = "test bench"
simulated_bench = "{bench}"
connected_by = "simulated-operator"

[station.analyzer]
profile = "generic-scpi-reflectometer"

[sweep]
start_hz = 100e6
stop_hz = 500e6
points = 201

[[band]]
name = "70cm"
start_hz = 420e6
stop_hz = 450e6
max_vswr = 1.20

[calibration]
kit = "kit.toml"

[[step]]
do = "calibrate"
"""


def test_lineproof_check_runs_the_condition_check_on_the_kit_over_the_sequences_sweep(tmp_path: Path) -> None:
    # 100-500 MHz in 2 MHz steps; a short offset by 625 ps reads as the open at 1 / (4 x 625 ps) = 400 MHz.
    (tmp_path / "kit.toml").write_text(KIT.format(delay=625e-12))
    bench = Path(__file__).parent.parent / "scenarios" / "batch-bench.toml"
    sequence = tmp_path / "sequence.toml"
    sequence.write_text(SEQUENCE.format(bench=bench))
    with pytest.raises(SequenceProblems) as caught:
        load_sequence(sequence)
    found = caught.value.problems
    in_kit = [p for p in found if p.path == str(tmp_path / "kit.toml")]
    assert len(in_kit) == 1 and in_kit[0].key == "standards.short" and in_kit[0].line == 8
    assert "at 400 MHz" in in_kit[0].problem and in_kit[0].fix.startswith("sweep clear of 400 MHz")
    pointer = [p for p in found if p.key == "calibration.kit"]
    assert len(pointer) == 1 and pointer[0].path == str(sequence) and pointer[0].line == 24
    # and without the coincidence in the sweep the same sequence loads
    (tmp_path / "kit.toml").write_text(KIT.format(delay=100e-12))
    assert load_sequence(sequence).calibration is not None


class GridAnalyzer:
    """An analyzer of the :mod:`lineproof.interfaces` contract on an ideal bench (raw = true
    reflection, the kit's standards exactly as modelled), that sweeps one standard on a grid
    shifted by ``shift_hz``."""

    def __init__(self, kit_path: Path, paths: str, shifted: str = "", shift_hz: float = 0.0) -> None:
        self.kit = load_kit(kit_path)
        self.capabilities = SimpleNamespace(ports=2, paths=paths, parameters=("S11", "S21", "S12", "S22"))
        self.shifted, self.shift_hz = shifted, shift_hz
        self.connected = ""

    def measure(self, parameters: Sequence[str], corrected: bool = False) -> MeasuredSweep:
        kind = self.kit.standards[self.connected].kind
        gamma = np.zeros(GRID.size, complex) if kind == "thru" else self.kit.ideal(kind, GRID)
        grid = GRID + (self.shift_hz if self.connected == self.shifted else 0.0)
        return MeasuredSweep(grid, {p: gamma if p in ("S11", "S22") else np.zeros(GRID.size, complex)
                                    for p in parameters})


class ConnectingOperator:
    def __init__(self, analyzer: GridAnalyzer) -> None:
        self.analyzer = analyzer

    def connect(self, port: int, thing: str, output: str | None, instruction: str, reversed: bool = False) -> None:
        self.analyzer.connected = thing


def station(analyzer: GridAnalyzer) -> steps.Station:
    return steps.Station(analyzer, ConnectingOperator(analyzer), InstrumentIdentity("T", "M", "0", "0"),
                         SweepPlan(1e9, 3e9, 201))


def calibrate(analyzer: GridAnalyzer) -> None:
    if analyzer.capabilities.paths == "reflection":
        steps.calibrate_one_port(station(analyzer), analyzer.kit)
    else:
        two_port_steps.calibrate_two_port(station(analyzer), analyzer.kit, calibration.FULL_TWO_PORT_METHOD)


@pytest.mark.parametrize("paths", ["reflection", "full"])
def test_calibration_steps_refuse_a_standard_swept_on_a_shifted_grid(paths: str, tmp_path: Path) -> None:
    path = tmp_path / "kit.toml"
    path.write_text(KIT.format(delay=0.0))
    calibrate(GridAnalyzer(path, paths))  # the same bench on one grid calibrates
    with pytest.raises(CalibrationError, match=r"standard short was measured on a different grid .*point 1: 1000001000 Hz"):
        calibrate(GridAnalyzer(path, paths, shifted="short", shift_hz=1e3))


@pytest.mark.parametrize("paths", ["reflection", "full"])
def test_calibration_steps_name_the_kit_file_when_its_standards_coincide(paths: str, tmp_path: Path) -> None:
    path = tmp_path / "kit.toml"
    path.write_text(KIT.format(delay=OFFSET_S))
    with pytest.raises(CalibrationError) as caught:
        calibrate(GridAnalyzer(path, paths))
    assert "at 2500 MHz" in str(caught.value) and f"(kit file {path})" in str(caught.value)
