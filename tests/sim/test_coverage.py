"""Coverage of the reported k = 2 interval against the simulated bench's hidden truth.

Over 1000 seeded trials the simulator's models are driven in-process (1000 benches over
sockets would take minutes; the models, their noise and their connector draws are the same
ones the SCPI server serves).  Each trial is a fresh bench: new actual standards drawn by the
simulator from the kit (scenario.actual_standards: ~0.5 ps offset delay, ~3 % fringing
capacitance, ~2 pH short inductance, a load of 40-45 dB return loss), new raw error terms,
new connector reflections and noise.  The station calibrates with the kit's nominal models,
measures a one-port of random reflection (a resistor with parasitics, built by the
simulator) and reports |Γ| with its interval at a random sweep point; the truth is the
object's own reflection, so the device's connection counts as an error.

The kit statement (sequences/kits/n50-illustrative.toml) describes that population of
standards, and the station states its connector repeatability as the RMS of the simulator's
draws (uniform in magnitude up to the scenario's figure: RMS = figure / sqrt(3)), as a
repeatability study would find it.  Trace noise is estimated from the data.
"""

from __future__ import annotations

import math
from dataclasses import replace
from functools import cache
from importlib import resources
from pathlib import Path

import numpy as np

from lineproof import calibration
from lineproof.calkit import load_kit
from lineproof.simulators import objects as sim_objects
from lineproof.simulators.analyzer_sim import SimulatedAnalyzer
from lineproof.simulators.scenario import actual_standards, load_scenario
from lineproof.uncertainty import UncertaintySettings, reflection_uncertainty, residual_model, termination_rms

KIT_NAME = "kits/n50-illustrative.toml"
TRIALS = 1000
POINTS = 201


@cache
def _scenario():
    return load_scenario("demo-bench")


def _bench(trial: int) -> tuple[SimulatedAnalyzer, dict[str, sim_objects.BenchObject], UncertaintySettings]:
    scenario = _scenario()
    kit_path = Path(str(resources.files("lineproof.sequences") / KIT_NAME))
    objects = dict(scenario.objects)
    objects.update(actual_standards(kit_path, 1.0, 5000 + trial))
    analyzer = SimulatedAnalyzer(replace(scenario.analyzer, seed=1000 + trial))
    analyzer.start_hz, analyzer.stop_hz, analyzer.points = 1e6, 3e9, POINTS
    settings = UncertaintySettings(connection_repeatability=scenario.analyzer.connection_repeatability / math.sqrt(3))
    return analyzer, objects, settings


def _corrected(analyzer: SimulatedAnalyzer, terms: dict[str, np.ndarray]) -> np.ndarray:
    analyzer.sweep()
    return calibration.correct_reflection(terms["directivity"], terms["source_match"], terms["reflection_tracking"],
                                          analyzer.traces["S11"])


def _calibrate(analyzer: SimulatedAnalyzer, objects: dict, kit) -> dict[str, np.ndarray]:
    f = analyzer.frequencies()
    measured = {}
    for kind in ("open", "short", "load"):
        analyzer.connect(1, objects[kind])
        analyzer.sweep()
        measured[kind] = analyzer.traces["S11"]
    return calibration.solve_one_port(f, measured, {kind: kit.ideal(kind, f) for kind in measured})


def run_trials(trials: int, as_terminated: bool, first: int = 0, coverage_factor: float | None = None) -> float:
    """Share of trials whose true |Γ| lies inside the reported interval; trials ``first`` to
    ``first + trials - 1`` (each seeds its own bench), k chosen by the model unless
    ``coverage_factor`` fixes it."""
    kit = load_kit(KIT_NAME)
    inside = 0
    residuals = None
    for trial in range(first, first + trials):
        rng = np.random.default_rng(trial)
        analyzer, objects, settings = _bench(trial)
        settings = replace(settings, coverage_factor=coverage_factor)
        f = analyzer.frequencies()
        terms = _calibrate(analyzer, objects, kit)
        # the same kit, grid and station every trial: the residual model is the same too
        residuals = residuals or residual_model(kit, ("open", "short", "load"), f, settings)
        reach = None
        if as_terminated:
            analyzer.connect(1, objects["good-termination"])
            load = _corrected(analyzer, terms)
            reach = termination_rms(load, reflection_uncertainty(residuals, load, f, settings).standard_uncertainty)
            serial = objects[f"TM150-000{rng.integers(1, 7)}"]
            analyzer.connect(1, serial, objects["good-termination"])
            truth = serial.response(f)[:, 0, 0]
        else:
            device = sim_objects.termination("dut", float(50 * np.exp(rng.uniform(-2.5, 2.5))),
                                             float(rng.uniform(0, 3e-9)), float(rng.uniform(0, 1.5e-12)))
            analyzer.connect(1, device)
            truth = device.response(f)
        spread = reflection_uncertainty(residuals, _corrected(analyzer, terms), f, settings, termination_reach=reach)
        point = rng.integers(f.size)
        inside += bool(spread.lower[point] <= abs(truth[point]) <= spread.upper[point])
    return inside / trials


def test_k2_interval_covers_the_truth_about_95_percent_of_the_time() -> None:
    coverage = run_trials(TRIALS, as_terminated=False)
    print(f"\ncoverage of the k=2 interval over {TRIALS} trials (one-port objects): {coverage:.1%}")
    assert 0.93 <= coverage <= 0.97


def test_as_terminated_interval_never_undercovers_the_device_itself() -> None:
    # Inline devices on the qualified termination, judged as the device itself (ideally
    # terminated): the termination is known only to the uncertainty of measuring it, so the
    # interval is wider than the truth needs -- it must not cover less.
    coverage = run_trials(300, as_terminated=True)
    print(f"\ncoverage over 300 trials (as-terminated inline devices, truth = device S11): {coverage:.1%}")
    assert coverage >= 0.95


if __name__ == "__main__":
    # The figures DEVELOPERS.md quotes beside the test's own: other seeds, and k fixed at 2
    # (about 100 s).
    for offset in (0, 1000, 2000, 3000):
        print(f"trials {offset}-{offset + TRIALS - 1}: {run_trials(TRIALS, False, first=offset):.1%}")
    print(f"k fixed at 2, trials 0-{TRIALS - 1}: {run_trials(TRIALS, False, coverage_factor=2.0):.1%}")
