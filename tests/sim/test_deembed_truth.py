"""Two-port de-embedding against the simulated bench's truth: a filter in a fixture (an input
adapter, the filter, an output adapter, cascaded by the simulator's own ABCD physics) is
calibrated and measured over TCP, the adapters are removed, and what is left must be the
filter alone as the simulator has it.  The output adapter is not the same seen from either
end, and its data come from a Touchstone file referred to 75 ohm (the simulator's physics
written out by scikit-rf), so a slip in its orientation or its reference impedance shows."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pytest
import skrf

from lineproof import deembed, steps, two_port, two_port_steps
from lineproof.calkit import load_kit
from lineproof.drivers import open_analyzer
from lineproof.operators import SimulatedOperator
from lineproof.simulators import physics
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient
from lineproof.values import BandLimit, DeviceIdentity, SweepPlan

SCENARIOS = Path(__file__).parent.parent / "scenarios"
PLAN = SweepPlan(50e6, 900e6, 301)
KIT = load_kit("kits/n50-illustrative.toml")
#: The AN 1287-11 line model (the input adapter's, and the kit's) against the simulator's
#: telegrapher's lines, after calibration and de-embedding (measured here: about 5e-5).
MODEL_AGREEMENT = 1e-4

FILTER = ('{ element = "shunt_capacitor", farad = 10e-12 }, { element = "series_inductor", henry = 60e-9 }, '
          '{ element = "shunt_capacitor", farad = 33e-12 }, { element = "series_inductor", henry = 60e-9 }, '
          '{ element = "shunt_capacitor", farad = 10e-12 }')
#: Input adapter, port 1 at the analyzer: 120 ps of 60-ohm line with 2 GΩ/s offset loss.
INPUT_LINE = '{ element = "line", ohm = 60.0, delay_s = 120e-12, loss_ohm_per_s = 2.0e9 }'
#: Output adapter as it sits in the fixture, from the filter to analyzer port 2: 90 ps of
#: 40-ohm line, then a 4 nH connector transition.
OUTPUT_ELEMENTS = ('{ element = "line", ohm = 40.0, delay_s = 90e-12 }, '
                   '{ element = "series_inductor", henry = 4.0e-9 }')
FIXTURE_OBJECTS = f"""
[objects.filter-alone]
kind = "device"
circuit = [{FILTER}]

[objects.filter-in-fixture]
kind = "device"
circuit = [{INPUT_LINE}, {FILTER}, {OUTPUT_ELEMENTS}]
"""


@pytest.fixture
def fixture_bench(tmp_path: Path, start_bench: Callable[..., SimulatedBench]) -> SimulatedBench:
    text = (SCENARIOS / "two-port-bench.toml").read_text(encoding="utf-8") + FIXTURE_OBJECTS
    scenario = tmp_path / "fixture-bench.toml"
    scenario.write_text(text, encoding="utf-8")
    return start_bench(str(scenario))


def output_adapter_file(folder: Path) -> Path:
    """The output adapter as it would be measured on its own, port 1 at analyzer port 2 (the
    inductor first), by the simulator's physics referred to 75 ohm, on a grid finer than the
    sweep, written by scikit-rf with its 75-ohm reference in the option line."""
    grid = np.linspace(10e6, 1.5e9, 2001)
    abcd = physics.cascade(physics.series_impedance(2j * np.pi * grid * 4.0e-9), physics.line(grid, 40.0, 90e-12))
    network = skrf.Network(frequency=skrf.Frequency.from_f(grid, unit="Hz"), s=physics.abcd_to_s(abcd, 75.0), z0=75.0)
    network.write_touchstone(str(folder / "output-adapter"))
    return folder / "output-adapter.s2p"


@contextmanager
def station(bench: SimulatedBench) -> Iterator[tuple[steps.Station, BenchControlClient]]:
    analyzer = open_analyzer(bench.visa_resource, "generic-scpi-analyzer")
    operator = SimulatedOperator(bench.control_address)
    try:
        with BenchControlClient(bench.control_address) as control:
            analyzer.configure(PLAN)
            yield steps.Station(analyzer, operator, analyzer.identify(), PLAN), control
    finally:
        operator.close()
        analyzer.close()


def test_two_port_adapters_are_removed_to_the_simulators_truth(fixture_bench: SimulatedBench, tmp_path: Path) -> None:
    f = PLAN.frequencies()
    path = output_adapter_file(tmp_path)
    assert skrf.Network(str(path)).z0[0, 0] == 75.0  # the file is referred to 75 ohm, the system to 50
    input_adapter = deembed.adapter_from_line(f, 120e-12, 50.0, impedance_ohm=60.0, name="input-line",
                                              loss_db_at_1ghz=8.686 * 2.0e9 * 120e-12 / (2 * 60.0))
    output_adapter = deembed.adapter_from_touchstone(path, f, 50.0)
    band = BandLimit("pass", 50e6, 200e6, 3.0)
    with station(fixture_bench) as (bench_station, control):
        cal = steps.calibrate(bench_station, KIT)
        device = DeviceIdentity("filter-in-fixture", "TL-30 in its test fixture")
        result, _, s = two_port_steps.measure_two_port_device(bench_station, cal, device, [band], "simple",
                                                              adapters=(input_adapter, output_adapter))
        truth = two_port.s_matrix(*(control.truth_s(object="filter-alone")[k] for k in ("s11", "s21", "s12", "s22")))
        in_fixture = two_port.s_matrix(*(control.truth_s(object="filter-in-fixture")[k]
                                         for k in ("s11", "s21", "s12", "s22")))
    np.testing.assert_allclose(s, truth, atol=MODEL_AGREEMENT)
    assert result.extra["reference_plane.input_adapter_removed"] == "input-line"
    assert result.extra["reference_plane.output_adapter_removed"] == "output-adapter"
    # Each slip would show: the fixture itself, the output adapter not turned round, or its
    # file read as if it were referred to 50 ohm, all leave the filter wrong by far more.
    assert np.max(np.abs(in_fixture - truth)) > 0.3
    wrong_way = deembed.Adapter("output-adapter", f, two_port.flipped(output_adapter.s))
    assert np.max(np.abs(deembed.remove_from_two_port(f, in_fixture, input_adapter, wrong_way) - truth)) > 0.05
    as_if_50 = deembed.Adapter("output-adapter", f, deembed.adapter_from_touchstone(path, f, 75.0).s)
    assert np.max(np.abs(deembed.remove_from_two_port(f, in_fixture, input_adapter, as_if_50) - truth)) > 0.05
