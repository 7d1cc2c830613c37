"""The simulated bench's imperfections over real TCP through pyvisa-py and the project's
drivers: trace noise as set, drift that follows the temperature profile and the clock,
connector repeatability as configured, limits of the instrument, sweep timing, and objects
(check standards, terminations, Touchstone files) with the right raw data."""

from __future__ import annotations

import time
from collections.abc import Iterator
from contextlib import closing

import numpy as np
import pytest
import pyvisa
import skrf
from error_model_reference import three_term_raw

from lineproof.drivers import open_analyzer
from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient

NOISE_FLOOR = 10 ** (-60 / 20)  # tests/scenarios/physics-bench.toml: noise_floor_db, at 1 kHz and 0 dBm
TRACE_NOISE = 1e-3
REPEATABILITY = 0.002  # connection_repeatability, at 1 GHz


@pytest.fixture
def bench(start_bench) -> SimulatedBench:
    return start_bench("physics-bench")


@pytest.fixture
def control(bench: SimulatedBench) -> Iterator[BenchControlClient]:
    with BenchControlClient(bench.control_address) as client:
        yield client


@pytest.fixture
def analyzer(bench: SimulatedBench) -> Iterator[ProfiledAnalyzer]:
    with closing(open_analyzer(bench.visa_resource, "generic-scpi-reflectometer")) as driver:
        yield driver


def _model_of_truth(control: BenchControlClient) -> np.ndarray:
    return three_term_raw(control.truth(1), control.error_terms(port=1, at="last_sweep"))


# -- noise ------------------------------------------------------------------------------------

@pytest.mark.parametrize("object_name, if_bandwidth_hz, power_dbm", [
    ("load", 1000.0, 0.0),
    ("load", 10000.0, 0.0),     # ten times the bandwidth: sqrt(10) times the noise
    ("load", 1000.0, -20.0),    # 20 dB less signal: ten times the noise relative to it
    ("short", 10.0, 0.0),       # a large signal: the trace noise proportional to it dominates
])
def test_noise_statistics_match_the_setting(analyzer, control, object_name: str, if_bandwidth_hz: float,
                                            power_dbm: float) -> None:
    from lineproof.values import SweepPlan

    control.request("set", noise=True)
    control.connect(1, object_name)
    analyzer.configure(SweepPlan(100e6, 1e9, 10001, if_bandwidth_hz=if_bandwidth_hz, power_dbm=power_dbm))
    residual = analyzer.measure(["S11"])["S11"] - _model_of_truth(control)
    clean = _model_of_truth(control)
    # Receiver noise is thermal: its power grows in proportion to the IF bandwidth (kTB,
    # Johnson-Nyquist), so its amplitude with the square root; relative to the signal it falls
    # as the source power rises (fact of the trade; Keysight "Network Analyzer Basics", from
    # memory).  The trace noise is a fixed fraction of the signal.  Half the power in each of
    # the real and imaginary parts.
    floor = NOISE_FLOOR * np.sqrt(if_bandwidth_hz / 1e3) * 10 ** (-power_dbm / 20)
    sigma = np.hypot(floor, TRACE_NOISE * np.abs(clean)) / np.sqrt(2)
    for part in (residual.real, residual.imag):
        normalised = part / sigma
        # 10001 samples: the sample standard deviation is within 2 % of the true one with
        # overwhelming probability (its relative standard error is 1/sqrt(2N) = 0.7 %).
        assert np.std(normalised) == pytest.approx(1.0, abs=0.025)
        assert abs(np.mean(normalised)) < 5 / np.sqrt(normalised.size)


# -- drift ------------------------------------------------------------------------------------

def test_drift_follows_the_temperature_profile(analyzer, control) -> None:
    from lineproof.values import SweepPlan

    analyzer.configure(SweepPlan(100e6, 1e9, 201))
    control.connect(1, "short")
    grid = np.linspace(100e6, 1e9, 201)
    raw = {}
    for seconds in (0, 300, 300, 300, 300):  # bench times 0, 300, 600, 900, 1200
        conditions = control.request("advance", seconds=seconds)
        raw[conditions["bench_seconds"]] = (conditions["temperature_c"], analyzer.measure(["S11"])["S11"],
                                            control.error_terms(port=1, at="last_sweep"))
        np.testing.assert_allclose(raw[conditions["bench_seconds"]][1], _model_of_truth(control), atol=1e-12)
    # The profile [[0, 23], [600, 28], [1200, 23]] interpolated linearly.
    assert [raw[t][0] for t in (0, 300, 600, 900, 1200)] == pytest.approx([23.0, 25.5, 28.0, 25.5, 23.0])
    base = raw[0][2]["reflection_tracking"]
    for seconds in (300, 600, 900):
        delta_k, hours = raw[seconds][0] - 23.0, seconds / 3600
        # The scenario's drift: tracking -0.1 %/K and -0.2 %/h; the 2.5 ns cable +50 ppm/K
        # plus 0.05 ps/h longer, both ways: phase -2 ω Δτ.
        gain = 1 - 0.001 * delta_k - 0.002 * hours
        extra_delay = 2.5e-9 * 50e-6 * delta_k + 0.05e-12 * hours
        expected = base * gain * np.exp(-1j * 2 * np.pi * grid * 2 * extra_delay)
        np.testing.assert_allclose(raw[seconds][2]["reflection_tracking"], expected, rtol=1e-12)
    # What the receivers see moves with it: the raw short at 28 °C is not the one at 23 °C.
    assert np.max(np.abs(raw[600][1] - raw[0][1])) > 0.005
    # Holding the bench at 23 °C brings back all but the drift of elapsed time.
    control.request("set", temperature_c=23.0)
    held = control.error_terms(port=1)["reflection_tracking"]
    np.testing.assert_allclose(held, base * (1 - 0.002 * 1200 / 3600)
                               * np.exp(-1j * 2 * np.pi * grid * 2 * 0.05e-12 * 1200 / 3600), rtol=1e-12)


# -- connector repeatability ---------------------------------------------------------------------

@pytest.mark.parametrize("size", [3e-4, 5e-3, 0.05, 0.6])  # a real connector's, and far beyond
def test_a_connector_in_front_of_a_load_is_the_cascade_of_its_step_and_the_load(size: float) -> None:
    # The simulator's closed form for a one-port behind a connector step, and its step's
    # transmission sqrt(1 - c²) (a series where c is small), against scikit-rf cascading the
    # step with the load (Network ** Network) from a step built with numpy's square root.
    from lineproof.simulators import physics

    rng = np.random.default_rng(11)
    f = np.linspace(1e6, 3e9, 501)
    c = size * np.exp(2j * np.pi * rng.uniform()) * (f / 3e9)
    gamma = 0.9 * np.exp(1j * rng.uniform(0, 2 * np.pi, f.size))
    step = np.empty((f.size, 2, 2), dtype=complex)
    step[:, 0, 0], step[:, 1, 1] = c, -c
    step[:, 0, 1] = step[:, 1, 0] = np.sqrt(1 - c * c)
    frequency = skrf.Frequency.from_f(f, unit="Hz")
    cascaded = (skrf.Network(frequency=frequency, s=step, z0=50)
                ** skrf.Network(frequency=frequency, s=gamma.reshape(-1, 1, 1), z0=50)).s[:, 0, 0]
    np.testing.assert_allclose(physics.behind_connector(c, gamma), cascaded, rtol=0, atol=1e-15)
    np.testing.assert_allclose(physics.connector_step(c), step, rtol=0, atol=3e-16)  # one unit in the last place


def test_connector_repeatability_shows_up_as_configured(control) -> None:
    grid = {"start_hz": 500e6, "stop_hz": 1e9, "points": 2}
    bare = control.truth_s(object="load", **grid)["s11"]
    steps = []
    for _ in range(400):
        control.connect(1, "load")
        truth = control.truth(1, **grid)
        # A small step c in front of the load: Γ' = c + (1 - c²) Γ / (1 + c Γ), so for a near
        # match Γ' - Γ ≈ c (to first order in Γ, which is 0.006 here).
        steps.append(truth - bare)
    steps = np.array(steps)
    at_1ghz = np.abs(steps[:, 1])
    # Configured: |c| uniform in [0, 0.002] at 1 GHz, growing in proportion to frequency.
    assert at_1ghz.max() < REPEATABILITY * 1.02
    assert at_1ghz.max() > REPEATABILITY * 0.95
    assert np.mean(at_1ghz) == pytest.approx(REPEATABILITY / 2, rel=0.1)  # uniform: mean r/2
    assert np.std(at_1ghz) == pytest.approx(REPEATABILITY / np.sqrt(12), rel=0.15)  # and r/sqrt(12)
    np.testing.assert_allclose(np.abs(steps[:, 0]), at_1ghz / 2, atol=2e-5)
    phase = np.angle(steps[:, 1])
    assert np.histogram(phase, bins=4, range=(-np.pi, np.pi))[0].min() > 60  # any phase


def test_reconnection_changes_the_raw_data_by_the_connection(analyzer, control) -> None:
    from lineproof.values import SweepPlan

    analyzer.configure(SweepPlan(1e9, 1e9, 1))
    readings = []
    for _ in range(25):
        control.connect(1, "good-termination")
        raw = analyzer.measure(["S11"])["S11"]
        np.testing.assert_allclose(raw, _model_of_truth(control), atol=1e-12)
        readings.append(raw[0])
    spread = np.ptp(np.real(readings)) + np.ptp(np.imag(readings))
    assert 0.0005 < spread < 4 * REPEATABILITY


# -- limits and timing ------------------------------------------------------------------------------

def _scpi(bench: SimulatedBench):
    manager = pyvisa.ResourceManager("@py")
    link = manager.open_resource(bench.visa_resource, read_termination="\n", write_termination="\n", timeout=5000)
    return manager, link


@pytest.mark.parametrize("command, query, kept", [
    ("SENSe:FREQuency:STARt 0.5e6", "SENSe:FREQuency:STARt?", "100000000"),  # below 1 MHz
    ("SENSe:FREQuency:STOP 3.5 GHz", "SENSe:FREQuency:STOP?", "1000000000"),  # above 3 GHz
    ("SENSe:SWEep:POINts 10002", "SENSe:SWEep:POINts?", "201"),  # above 10001
    ("SENSe:SWEep:POINts 0", "SENSe:SWEep:POINts?", "201"),
])
def test_range_and_points_refused_through_the_error_queue(bench, command: str, query: str, kept: str) -> None:
    manager, link = _scpi(bench)
    try:
        link.write(command)
        # SCPI-1999 Vol 2, error queue, execution errors: -222 "Data out of range" (from memory);
        # the setting is unchanged.
        assert link.query("SYSTem:ERRor?") == '-222,"Data out of range"'
        assert link.query(query) == kept
    finally:
        link.close()
        manager.close()


def test_sweep_time_follows_points_and_if_bandwidth(start_bench) -> None:
    bench = start_bench("corrected-bench")
    manager, link = _scpi(bench)
    try:
        link.write("SENSe:SWEep:POINts 101;:SENSe:BANDwidth 1000")
        # points x (1/IFBW + 20 us per point) + 5 ms, for each of the full model's two directions
        expected = 2 * (101 * (1 / 1000 + 20e-6) + 0.005)
        assert float(link.query("SENSe:SWEep:TIME?")) == pytest.approx(expected)
        started = time.monotonic()
        assert link.query("INITiate;*OPC?") == "1"  # time_scale = 1: as long as the real sweep
        assert time.monotonic() - started >= expected
    finally:
        link.close()
        manager.close()


# -- objects ------------------------------------------------------------------------------------

def _vswr(gamma: np.ndarray) -> np.ndarray:
    return (1 + np.abs(gamma)) / (1 - np.abs(gamma))


def test_check_standards_and_terminations_have_their_textbook_values(control) -> None:
    grid = {"start_hz": 1e6, "stop_hz": 1e9, "points": 1000}
    f = np.linspace(1e6, 1e9, 1000)
    # 100 ohm on a 50-ohm line: Γ = (100 - 50) / (100 + 50) = 1/3, VSWR 2 (Pozar eq. 2.35, 2.41).
    assert _vswr(control.truth_s(object="mismatch-2to1", **grid)["s11"]) == pytest.approx(2.0)
    # A 75-ohm quarter-wave section on 50 ohm transforms it to 75²/50 = 112.5 ohm (Pozar
    # §5.4): |Γ| peaks at 62.5/162.5 = 0.3846 where the 250 ps section is a quarter wave, 1 GHz.
    line = np.abs(control.truth_s(object="line-check", **grid)["s11"])
    assert line.max() == pytest.approx(62.5 / 162.5, rel=1e-6)
    assert f[np.argmax(line)] == pytest.approx(1 / (4 * 250e-12), rel=2e-3)
    good = _vswr(control.truth_s(object="good-termination", **grid)["s11"])
    poor = _vswr(control.truth_s(object="poor-termination", **grid)["s11"])
    assert good.max() < 1.02  # about 1.01:1 (DESIGN.md: a good termination)
    assert poor[0] < 1.05 and poor[f > 450e6].min() > 1.1 and np.all(np.diff(poor) > 0)  # rising past 1.1:1


def test_touchstone_termination_is_served_with_the_right_raw_data(analyzer, control) -> None:
    from lineproof.simulators.scenario_objects import resolve
    from lineproof.values import SweepPlan

    network = skrf.Network(str(resolve("tarnmoor-dl1k-dummy-load.s1p", None)))
    for plan in (SweepPlan(network.f[0], network.f[-1], network.f.size),  # the file's own grid
                 SweepPlan(3e6, 950e6, 333)):  # between its points: linear in re and im
        analyzer.configure(plan)
        control.connect(1, "dummy-load")
        raw = analyzer.measure(["S11"])["S11"]
        f = plan.frequencies()
        gamma = np.interp(f, network.f, network.s[:, 0, 0].real) + 1j * np.interp(f, network.f, network.s[:, 0, 0].imag)
        np.testing.assert_allclose(control.truth_s(object="dummy-load")["s11"], gamma, atol=1e-15)
        # connection repeatability adds a small step: the raw data is the model of the truth
        np.testing.assert_allclose(raw, _model_of_truth(control), atol=1e-12)
        assert np.max(np.abs(control.truth(1) - gamma)) < REPEATABILITY * f[-1] / 1e9 * 1.1


def test_touchstone_two_port_is_served_with_the_right_raw_data(analyzer, control) -> None:
    from lineproof.simulators.scenario_objects import resolve
    from lineproof.values import SweepPlan

    network = skrf.Network(str(resolve("tarnmoor-adnu1-adapter.s2p", None)))
    load = skrf.Network(str(resolve("tarnmoor-dl1k-dummy-load.s1p", None)))
    analyzer.configure(SweepPlan(network.f[0], network.f[-1], network.f.size))
    control.request("set", temperature_c=23.0)
    for reversed_ in (False, True):
        control.connect(1, "adapter", "dummy-load", reversed=reversed_)
        raw = analyzer.measure(["S11"])["S11"]
        s = network.flipped().s if reversed_ else network.s
        # The adapter ended in the dummy load, by scikit-rf's own cascade (a reference library).
        terminated = skrf.Network(frequency=network.frequency, s=s) ** load
        truth = control.truth(1)
        steps = truth - terminated.s[:, 0, 0]
        assert np.max(np.abs(steps)) < 1.1 * REPEATABILITY  # only the connection's own step
        np.testing.assert_allclose(raw, _model_of_truth(control), atol=1e-12)


def test_internal_correction_serves_corrected_data(start_bench) -> None:
    from lineproof.values import SweepPlan

    bench = start_bench("corrected-bench")
    with closing(open_analyzer(bench.visa_resource, "generic-scpi-analyzer")) as analyzer, \
            BenchControlClient(bench.control_address) as control:
        analyzer.configure(SweepPlan(50e6, 500e6, 101, if_bandwidth_hz=100e3))
        control.connect(1, "TL30-0001", "port:2")
        corrected = analyzer.measure(["S11", "S21", "S12", "S22"], corrected=True)
        truth = control.truth_s(port=1)
        raw = analyzer.measure(["S11"])
        # Within what the residual terms allow: -46 dB directivity, -40 dB matches (a
        # reflection of |Γ| sees about e_d + e_s |Γ|² + ...), far from the raw data.
        for name in ("s11", "s21", "s12", "s22"):
            assert np.max(np.abs(corrected[name.upper()] - truth[name])) < 0.03, name
        assert np.max(np.abs(raw["S11"] - truth["s11"])) > 0.2
        # The held calibration does not follow the bench: 10 K warmer, the tracking has fallen
        # by 2 % (-0.2 %/K in the scenario), and so has the corrected filter's stop-band
        # reflection (|Γ| near 1 at 500 MHz).
        control.request("set", temperature_c=33.0)
        warm = analyzer.measure(["S11"], corrected=True)["S11"]
        assert np.abs(warm[-1]) / np.abs(corrected["S11"][-1]) == pytest.approx(0.98, abs=0.003)
