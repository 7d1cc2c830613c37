"""Coverage of the intervals of two-port figures against the simulated bench's hidden truth.

Like tests/sim/test_coverage.py, with the simulator's full two-port model driven in-process:
each trial is a fresh bench of the demo-switch scenario's analyzer (new actual standards drawn
by the simulator from the kit, new raw error terms, new connector reflections and noise); the
station calibrates SOLT with the kit's nominal models (both ports' reflect standards, then the
flush thru), qualifies the termination, and measures an inline meter head of the scenario's
population between the ports.  At a random sweep point each figure -- input match (S11),
output match (S22), insertion loss, and the as-terminated reflection computed from the
S-parameters and the termination's measured reflection -- is compared with the truth (the
object's own S-parameters; for the as-terminated figure, with the true termination on its
output).  The station states its connector repeatability as the RMS of the simulator's draws.
"""

from __future__ import annotations

import math
from dataclasses import replace
from functools import cache
from importlib import resources
from pathlib import Path

import numpy as np

from lineproof import calibration, figures, metrics, two_port
from lineproof.calibration import make_record
from lineproof.calkit import load_kit
from lineproof.simulators.analyzer_sim import SimulatedAnalyzer
from lineproof.simulators.scenario import actual_standards, load_scenario
from lineproof.uncertainty import UncertaintySettings, reflection_uncertainty, residual_model, transmission_model
from lineproof.values import InstrumentIdentity, SweepPlan

KIT_NAME = "kits/n50-illustrative.toml"
TRIALS = 300
PLAN = SweepPlan(1e6, 1.5e9, 151)
REFLECTS = ("open", "short", "load")


@cache
def _scenario():
    return load_scenario("demo-switch")


def _sweep(analyzer: SimulatedAnalyzer) -> dict[str, np.ndarray]:
    analyzer.sweep()
    return dict(analyzer.traces)


def _calibrate(analyzer: SimulatedAnalyzer, objects: dict, kit, settings: UncertaintySettings):
    f = analyzer.frequencies()
    port1, port2 = {}, {}
    for kind in REFLECTS:
        analyzer.connect(1, objects[kind])
        analyzer.connect(2, objects[kind])  # port 2's set: the same actual standards
        traces = _sweep(analyzer)
        port1[kind], port2[kind] = traces["S11"], traces["S22"]
    analyzer.connect(1, objects["thru"], output_port=2)
    thru = _sweep(analyzer)
    raw = two_port.s_matrix(thru["S11"], thru["S21"], thru["S12"], thru["S22"])
    ideals = {kind: kit.ideal(kind, f) for kind in REFLECTS}
    terms = two_port.solve_solt(f, port1, port2, ideals, raw, kit.thru(f))
    residuals = residual_model(kit, REFLECTS, f, settings)
    residuals.update(residual_model(kit, REFLECTS, f, settings, "port2"))
    residuals.update(transmission_model(kit, f, settings))
    return make_record(calibration.FULL_TWO_PORT_METHOD, terms, f, PLAN, InstrumentIdentity("s", "m", "n", "f"),
                       kit.name, kit.sha256, 50.0, residuals)


def run_trials(trials: int) -> dict[str, float]:
    """Share of trials whose truth lies inside each figure's reported interval."""
    kit = load_kit(KIT_NAME)
    kit_path = Path(str(resources.files("lineproof.sequences") / KIT_NAME))
    scenario = _scenario()
    settings = UncertaintySettings(connection_repeatability=scenario.analyzer.connection_repeatability / math.sqrt(3))
    inside = dict.fromkeys(figures.FIGURES, 0)
    serials = sorted(name for name in scenario.objects if name.startswith("TM150-"))
    for trial in range(trials):
        rng = np.random.default_rng(trial)
        objects = {**scenario.objects, **actual_standards(kit_path, 1.0, 7000 + trial)}
        analyzer = SimulatedAnalyzer(replace(scenario.analyzer, seed=3000 + trial))
        analyzer.start_hz, analyzer.stop_hz, analyzer.points = PLAN.start_hz, PLAN.stop_hz, PLAN.points
        f = analyzer.frequencies()
        cal = _calibrate(analyzer, objects, kit, settings)
        analyzer.connect(1, objects["good-termination"])
        load = calibration.correct_one_port(cal, f, _sweep(analyzer)["S11"])
        known = (load, reflection_uncertainty(cal.residuals, load, f, settings).standard_uncertainty)
        device = objects[serials[rng.integers(len(serials))]]
        analyzer.connect(1, device, output_port=2)
        raw = _sweep(analyzer)
        s = two_port.TwelveTermCorrection(cal).apply(f, raw["S11"], raw["S21"], raw["S12"], raw["S22"])
        found = {t.name: t for t in figures.two_port_figures(cal, f, s, settings, known)}
        truth = device.response(f)
        true_values = {
            figures.INPUT_MATCH: np.abs(truth[:, 0, 0]), figures.OUTPUT_MATCH: np.abs(truth[:, 1, 1]),
            figures.INSERTION_LOSS: metrics.insertion_loss_db(truth[:, 1, 0]),
            figures.AS_TERMINATED: np.abs(two_port.terminated_reflection(
                truth, objects["good-termination"].response(f))),
        }
        point = rng.integers(f.size)
        for name, trace in found.items():
            inside[name] += bool(abs(trace.values[point] - true_values[name][point]) <= trace.expanded[point])
    return {name: count / trials for name, count in inside.items()}


def test_two_port_intervals_cover_the_truth() -> None:
    coverage = run_trials(TRIALS)
    print(f"\ncoverage over {TRIALS} trials (SOLT, inline meter heads): "
          + ", ".join(f"{name} {share:.1%}" for name, share in coverage.items()))
    for name, share in coverage.items():
        assert share >= 0.93, name
