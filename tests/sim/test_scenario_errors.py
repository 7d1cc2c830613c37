"""Every mistake in a scenario file is an InputError naming the file, the key, the line and the
fix -- found when the file is read, not at the first sweep -- and ``lineproof sim`` reports it
with exit code 3 and no traceback."""

from __future__ import annotations

import subprocess
import sys
from importlib import resources
from pathlib import Path

import pytest

from lineproof.errors import InputError
from lineproof.simulators.scenario import load_scenario

SCENARIOS = Path(__file__).parent.parent / "scenarios"
IDEAL_IDENTITY = 'identity = "Tarnmoor Instruments,SIM-R1 reflectometer (simulated),SIM0099,1.0"'
SWITCH_IDENTITY = 'identity = "Tarnmoor Instruments,SIM-X24 switch matrix (simulated),SIMX777,1.0"'


def write_variant(folder: Path, base: str, old: str, new: str) -> Path:
    text = (SCENARIOS / f"{base}.toml").read_text(encoding="utf-8")
    assert old in text, old  # the case still edits what it means to
    path = folder / f"{base}.toml"
    path.write_text(text.replace(old, new, 1), encoding="utf-8")
    return path


def line_of(path: Path, marker: str) -> int:
    """The line of the first occurrence of ``marker`` (the line the error should name)."""
    for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
        if marker in line:
            return number
    raise AssertionError(f"{marker!r} not in {path}")


# (base scenario, old text, new text, key, problem, line marker)
CASES = [
    # wrong types: once tracebacks from `lineproof sim` (exit 1)
    ("ideal-bench", "ports = 1", 'ports = "two"', "analyzer.ports", "'two' is not an integer", 'ports = "two"'),
    ("ideal-bench", "ports = 1", 'ports = 1\nmax_points = "many"', "analyzer.max_points",
     "'many' is not an integer", "max_points"),
    ("ideal-bench", "ports = 1", "ports = 1\nmax_points = 2.5", "analyzer.max_points", "2.5 is not an integer",
     "max_points"),
    ("ideal-bench", "seed = 99", 'seed = "x"', "bench.seed", "'x' is not an integer", 'seed = "x"'),
    ("ideal-bench", IDEAL_IDENTITY, "identity = 5", "analyzer.identity", "5 is not a string", "identity = 5"),
    ("ideal-bench", "ports = 1", "ports = 1\ninternal_correction = \"yes\"", "analyzer.internal_correction",
     "is not true or false", "internal_correction"),
    # values found only at the first sweep before
    ("ideal-bench", "ports = 1", "ports = 1\nmax_points = 0", "analyzer.max_points", "0 is out of range (>= 1",
     "max_points"),
    ("ideal-bench", "ports = 1", "ports = 1\nfrequency_min_hz = 4e9", "analyzer.frequency_min_hz",
     "the frequency range 4e+09..3e+09 Hz is empty", "frequency_min_hz"),
    ("ideal-bench", "ports = 1", "ports = 1\nfrequency_min_hz = 1e6\nfrequency_max_hz = 1e6",
     "analyzer.frequency_max_hz", "is empty", "frequency_max_hz"),
    ("ideal-bench", "ports = 1", 'ports = 1\nnoise_floor_db = "x"', "analyzer.noise_floor_db", "'x' is not a number",
     "noise_floor_db"),
    ("ideal-bench", "ports = 1", "ports = 1\nnoise_floor_db = 10", "analyzer.noise_floor_db", "out of range (<= 0)",
     "noise_floor_db"),
    ("ideal-bench", "ports = 1", "ports = 1\ntrace_noise = nan", "analyzer.trace_noise", "not a finite number",
     "trace_noise"),
    ("ideal-bench", IDEAL_IDENTITY, 'identity = "Tarnmoor Instruments,SIM-R1"', "analyzer.identity",
     "2 comma-separated field(s), not four", "identity ="),
    ("ideal-bench", IDEAL_IDENTITY, 'identity = "Tarnmoor,SIM-R1;RST,SIM0099,1.0"', "analyzer.identity",
     "without ';'", "identity ="),
    ("ideal-bench", "cable_delay_s = 3.1e-9", "cable_delay_s = 3.1e-9\nripple_period_hz = 0",
     "analyzer.port[0].ripple_period_hz", "0.0 is out of range (> 0)", "ripple_period_hz"),
    # values that passed silently
    ("ideal-bench", "seed = 99", "seed = 99\ntime_scale = -1", "bench.time_scale", "-1.0 is out of range (>= 0)",
     "time_scale"),
    ("ideal-bench", "ports = 1", "ports = 1\ntime_scale = -0.5", "analyzer.time_scale", "out of range (>= 0)",
     "time_scale"),
    ("ideal-bench", "seed = 99", "seed = -1", "bench.seed", "-1 is out of range (>= 0)", "seed = -1"),
    ("ideal-bench", "ports = 1", "ports = 1\nsession_seed = -3", "analyzer.session_seed", "out of range",
     "session_seed"),
    ("ideal-bench", "connection_repeatability = 0.0", "connection_repeatability = -0.001",
     "analyzer.connection_repeatability", "out of range (>= 0 and <= 1)", "connection_repeatability"),
    ("ideal-bench", "seed = 99", "seed = 99\ntemperature_c = 300", "bench.temperature_c", "out of range",
     "temperature_c"),
    ("ideal-bench", "seed = 99", "seed = 99\ntemperature_c = nan", "bench.temperature_c", "not a finite number",
     "temperature_c"),
    ("ideal-bench", "seed = 99", "seed = 99\ntemperature_profile = [[0, 23], [inf, 30]]",
     "bench.temperature_profile", "times must be finite", "temperature_profile"),
    ("ideal-bench", "deviation = 0.0", "deviation = -1.0", "standards.deviation", "-1.0 is out of range (>= 0)",
     "deviation"),
    ("ideal-bench", "resistance_ohm = 50.4", "resistance_ohm = -50.4", "objects.good-termination.resistance_ohm",
     "-50.4 is not a non-negative finite number", "resistance_ohm = -50.4"),
    ("ideal-bench", "count = 3", "count = 0", "populations[0].count", "count = 0 is out of range", "count = 0"),
    ("ideal-bench", "spread = 0.03", "spread = -0.03", "populations[0].spread", "not a non-negative", "spread"),
    ("ideal-bench", '{ element = "series_inductor", henry = 2.0e-9 },\n    { element = "shunt_capacitor"',
     '{ element = "series_inductor", henry = -2.0e-9 },\n    { element = "shunt_capacitor"',
     "populations[0].circuit[0].henry", "element 0 has henry = -", "circuit = ["),
    # misspelt keys and tables
    ("ideal-bench", "seed = 99", "seed = 99\ntime_scal = 1", "bench.time_scal", "unknown key", "time_scal"),
    ("ideal-bench", "[objects.good-termination]", '[objcts.spare]\nkind = "termination"\n\n[objects.good-termination]',
     "objcts", "unknown table", "[objcts.spare]"),
    ("ideal-bench", "deviation = 0.0", "deviation = 0.0\ndevation = 1.0", "standards.devation", "unknown key",
     "devation"),
    ("ideal-bench", "cable_delay_s = 3.1e-9", "cable_delay_s = 3.1e-9\ncable_dealy_s = 1e-9",
     "analyzer.port[0].cable_dealy_s", "unknown key", "cable_dealy_s"),
    ("ideal-bench", "[standards]", '[analyzer.drift]\ntracking_per_k = "x"\n\n[standards]',
     "analyzer.drift.tracking_per_k", "'x' is not a number", "tracking_per_k"),
    ("ideal-bench", "[standards]", '[[faults]]\ninstrument = [1]\nkind = "drop"\n\n[standards]',
     "faults[0].instrument", "[1] is not a string", "instrument = [1]"),
    # the switch
    ("switch-bench", "modules = 2", 'modules = "two"', "switch.modules", "'two' is not an integer", "modules ="),
    ("switch-bench", "modules = 2", "modules = 0", "switch.modules", "out of range (>= 1", "modules ="),
    ("switch-bench", "path_mismatch = 0.002", "path_mismatch = 1.5", "switch.path_mismatch",
     "1.5 is out of range (>= 0 and <= 1)", "path_mismatch"),
    ("switch-bench", "\nrepeatability = 0.0", "\nrepeatability = -0.1", "switch.repeatability", "out of range",
     "repeatability = -0.1"),
    ("switch-bench", "path_loss_db = 0.05", "path_loss_db = -0.05", "switch.path_loss_db", "out of range",
     "path_loss_db"),
    ("switch-bench", SWITCH_IDENTITY, 'identity = "switch"', "switch.identity", "not four non-empty",
     'identity = "switch"'),
]


@pytest.mark.parametrize("base, old, new, key, problem, marker", CASES, ids=[f"{c[3]}:{c[2][:30]}" for c in CASES])
def test_a_scenario_mistake_names_file_key_line_and_fix(tmp_path: Path, base: str, old: str, new: str, key: str,
                                                         problem: str, marker: str) -> None:
    path = write_variant(tmp_path, base, old, new)
    with pytest.raises(InputError) as caught:
        load_scenario(path)
    error = caught.value
    assert (error.path, error.key) == (str(path), key)
    assert problem in error.problem
    assert error.fix  # every problem says how to fix it
    assert error.line == line_of(path, marker)
    assert str(error).startswith(f"{path}:{error.line} [{key}]: ")


KIT_CASES = [
    ('offset_delay_s = 45.0e-12', 'offset_delay_s = "45 ps"', "standards.open.offset_delay_s",
     "'45 ps' is not a number", "offset_delay_s = \"45 ps\""),
    ('offset_delay_s = 48.0e-12', "offset_delay_s = -48.0e-12", "standards.short.offset_delay_s",
     "not a non-negative finite number", "offset_delay_s = -48"),
    ("capacitance = [55.0e-15, 250.0e-27, -20.0e-36, 1.5e-45]", 'capacitance = ["a"]',
     "standards.open.capacitance", "is not a list of one to four numbers", "capacitance = ["),
    ("inductance = [0.0, 0.0, 0.0, 0.0]", "inductance = [0.0, 0.0, 0.0, 0.0, 1.0]", "standards.short.inductance",
     "is not a list of one to four numbers", "inductance = ["),
    ('kind = "open"', 'kind = "opne"', "standards.open.kind", "unknown standard kind 'opne'", 'kind = "opne"'),
    ("reference_impedance_ohm = 50.0", "reference_impedance_ohm = 0.0", "kit.reference_impedance_ohm",
     "not a positive finite number", "reference_impedance_ohm"),
]


@pytest.mark.parametrize("old, new, key, problem, marker", KIT_CASES, ids=[c[2] for c in KIT_CASES])
def test_a_kit_number_the_simulator_reads_is_checked(tmp_path: Path, old: str, new: str, key: str, problem: str,
                                                      marker: str) -> None:
    shipped = resources.files("lineproof.sequences") / "kits" / "n50-illustrative.toml"
    text = shipped.read_text(encoding="utf-8")
    assert old in text, old
    kit = tmp_path / "kit.toml"
    kit.write_text(text.replace(old, new, 1), encoding="utf-8")
    scenario = write_variant(tmp_path, "ideal-bench", 'kit = "kits/n50-illustrative.toml"', 'kit = "kit.toml"')
    with pytest.raises(InputError) as caught:
        load_scenario(scenario)
    error = caught.value
    assert (error.path, error.key) == (str(kit), key)
    assert problem in error.problem
    assert error.fix
    assert error.line == line_of(kit, marker)


def test_the_shipped_and_test_scenarios_still_load() -> None:
    from lineproof.simulators.scenario import shipped_scenarios

    for name in [*shipped_scenarios(), *sorted(SCENARIOS.glob("*.toml"))]:
        assert load_scenario(name).analyzers


def test_lineproof_sim_reports_a_scenario_mistake_with_exit_3_and_no_traceback(tmp_path: Path) -> None:
    path = write_variant(tmp_path, "ideal-bench", "ports = 1", 'ports = "two"')
    done = subprocess.run([sys.executable, "-m", "lineproof.cli", "sim", str(path)], capture_output=True, text=True,
                          timeout=60)
    assert done.returncode == 3, done.stderr
    assert "Traceback" not in done.stderr + done.stdout
    assert f"{path}:{line_of(path, 'ports =')} [analyzer.ports]: wrong type: 'two' is not an integer" in done.stderr
    assert "fix: write an integer" in done.stderr
