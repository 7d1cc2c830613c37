"""Benchmark: host-side processing of a 10,001-point sweep and solving a 10,001-point SOLT,
as ratios to scikit-rf's own calls on the same data.  Prints figures; asserts nothing on time
(only that the SOLT solves agree to 1e-12).

    .venv/bin/python tests/bench/bench_calibration.py
"""

from __future__ import annotations

import time
import tracemalloc
import warnings
from collections.abc import Callable

import numpy as np
import skrf
from skrf.calibration import SOLT, OnePort, TwelveTerm

from lineproof import calibration, figures, markers, metrics, steps, two_port
from lineproof.calkit import load_kit
from lineproof.two_port_residuals import through_path, thru_view
from lineproof.uncertainty import (
    UncertaintySettings,
    reflection_uncertainty,
    residual_model,
    transmission_model,
    transmission_uncertainty_traces_db,
)
from lineproof.values import BandLimit, DeviceIdentity, InstrumentIdentity, SweepPlan

POINTS = 10_001
PLAN = SweepPlan(1e6, 3e9, POINTS)
F = PLAN.frequencies()
FREQUENCY = skrf.Frequency.from_f(F, unit="Hz")
IDENTITY = InstrumentIdentity("Bench", "Model", "0", "0")
BANDS = (BandLimit("2m", 144e6, 148e6, 1.1), BandLimit("70cm", 420e6, 450e6, 1.2, max_insertion_loss_db=0.5),
         BandLimit("23cm", 1240e6, 1300e6, 1.3, min_return_loss_db=16.0))
SETTINGS = UncertaintySettings(connection_repeatability=3e-4)
RNG = np.random.default_rng(2026)


def phasor(scale: float) -> np.ndarray:
    return scale * RNG.uniform(0.5, 1.5, POINTS) * np.exp(1j * RNG.uniform(0, 2 * np.pi, POINTS))


def best_of(call: Callable[[], object], repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        call()
        times.append(time.perf_counter() - start)
    return min(times)


def peak_bytes(call: Callable[[], object]) -> int:
    tracemalloc.start()
    call()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak


def one_port() -> None:
    kit = load_kit("kits/n50-illustrative.toml")
    terms = {"directivity": phasor(0.05), "source_match": phasor(0.1), "reflection_tracking": phasor(0.85)}
    cal = calibration.make_record(calibration.ONE_PORT_METHOD, terms, F, PLAN, IDENTITY, kit.name, kit.sha256, 50.0,
                                  residual_model(kit, ("open", "short", "load"), F, SETTINGS))
    device = 0.1 * np.exp(-2j * np.pi * F * 0.8e-9)
    raw = calibration.embed_reflection(terms["directivity"], terms["source_match"], terms["reflection_tracking"], device)
    termination = np.full(POINTS, 0.012)
    identity = DeviceIdentity("TM150-0001", "TM-150")

    def ours() -> object:
        corrected = calibration.correct_one_port(cal, F, raw)
        spread = reflection_uncertainty(cal.residuals, corrected, F, SETTINGS, termination_reach=termination)
        return steps.judge(identity, F, corrected, BANDS[:1] + BANDS[2:], "guard-banded", spread.expanded,
                           markers={"145 MHz": 145e6})

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reference = OnePort.from_coefs(FREQUENCY, {"directivity": terms["directivity"],
                                                   "source match": terms["source_match"],
                                                   "reflection tracking": terms["reflection_tracking"]})
    network = skrf.Network(frequency=FREQUENCY, s=raw)

    def library() -> object:
        return reference.apply_cal(network)

    report("1-port: correction + metrics + uncertainty + decision", ours, "OnePort.apply_cal", library, 0.1)


def two_port_processing() -> None:
    kit = load_kit("kits/n50-illustrative.toml")
    terms = {f"{d}.{t}": phasor(s) for d in ("forward", "reverse") for t, s in (
        ("directivity", 0.05), ("source_match", 0.1), ("reflection_tracking", 0.85), ("load_match", 0.1),
        ("transmission_tracking", 0.85), ("isolation", 1e-5))}
    residuals = residual_model(kit, ("open", "short", "load"), F, SETTINGS)
    residuals.update(residual_model(kit, ("open", "short", "load"), F, SETTINGS, "port2"))
    residuals.update(transmission_model(kit, F, SETTINGS))
    cal = calibration.make_record(calibration.FULL_TWO_PORT_METHOD, terms, F, PLAN, IDENTITY, kit.name, kit.sha256,
                                  50.0, residuals)
    media = skrf.media.DefinedGammaZ0(FREQUENCY, z0_port=50.0, z0=50.0)
    device = (media.inductor(2e-9) ** media.shunt_capacitor(0.8e-12) ** media.line(0.12, unit="m")).s
    raw = two_port.embed_two_port(terms, device)
    # The raw traces as a sweep delivers them (MeasuredSweep: one contiguous array per parameter).
    traces = tuple(np.ascontiguousarray(raw[:, i, j]) for i, j in ((0, 0), (1, 0), (0, 1), (1, 1)))
    identity = DeviceIdentity("TC20-0001", "TC-20")
    correction = two_port.TwelveTermCorrection(cal)  # once per calibration, as a run does
    thru = thru_view(cal.residuals, cal.terms["forward.load_match"])  # likewise

    def ours() -> object:
        s11, s21, s12, s22 = correction.apply(F, *traces)
        path = through_path(cal.residuals, s21 * s12, s22, cal.terms["forward.load_match"], thru=thru)
        spread = reflection_uncertainty(cal.residuals, s11, F, SETTINGS, transmission=path)
        through = np.abs(s21)
        loss = metrics.insertion_loss_db(through)
        loss_u = transmission_uncertainty_traces_db(cal.residuals, s11, s21, s22, SETTINGS, s21_magnitude=through)
        return steps.judge(identity, F, s11, BANDS, "guard-banded", spread.expanded, insertion_loss_db=loss,
                           insertion_loss_uncertainty_db=loss_u)

    coefs = {f"{k.split('.')[0]} {k.split('.')[1].replace('_', ' ')}": v for k, v in terms.items()}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reference = TwelveTerm.from_coefs(FREQUENCY, coefs, n_thrus=1)
    network = skrf.Network(frequency=FREQUENCY, s=raw)

    def library() -> object:
        return reference.apply_cal(network)

    report("2-port: correction + metrics + uncertainty + decision", ours, "TwelveTerm.apply_cal", library, 1.0)
    # what a two-port run does per device: all four figures, each with its uncertainty, judged,
    # and the phase's uncertainty for each band's group delay
    views = figures.thru_views(cal)
    termination = (np.full(POINTS, 0.01 + 0.005j), np.full(POINTS, 0.002))

    def every_figure() -> object:
        s = correction.apply(F, *traces)
        found = figures.two_port_figures(cal, F, s, SETTINGS, termination, views)
        judged = (figures.AS_TERMINATED, figures.INSERTION_LOSS)
        return figures.judge_figures(identity, F, figures.headline_first(found, judged), BANDS, "guard-banded", judged,
                                     transmission=figures.transmission_trace(cal, s, SETTINGS, found))

    report("2-port: the four figures of a run (as-terminated, input and output match, insertion loss)", every_figure,
           "TwelveTerm.apply_cal", library, None)
    corrected = correction.apply(F, *traces)
    found = figures.two_port_figures(cal, F, corrected, SETTINGS, termination, views)
    report("2-port: of those, the phase's uncertainty and the group delay (markers, each band's group delay)",
           lambda: markers.group_delay(F, figures.transmission_trace(cal, corrected, SETTINGS, found)),
           "TwelveTerm.apply_cal", library, None)
    # for scale: scikit-rf's two-port apply_cal is itself a vectorised closed form
    report("2-port: correction alone", lambda: correction.apply(F, *traces), "TwelveTerm.apply_cal",
           library, None)


def solt_solve() -> None:
    kit = load_kit("kits/n50-illustrative.toml")
    terms = {f"{d}.{t}": phasor(s) for d in ("forward", "reverse") for t, s in (
        ("directivity", 0.05), ("source_match", 0.1), ("reflection_tracking", 0.85), ("load_match", 0.1),
        ("transmission_tracking", 0.85), ("isolation", 1e-5))}
    ideals = {kind: kit.ideal(kind, F) for kind in ("open", "short", "load")}
    zero = np.zeros(POINTS, complex)
    reflects = {k: two_port.s_matrix(v, zero, zero, v) for k, v in ideals.items()}
    measured = {k: two_port.embed_two_port(terms, v) for k, v in reflects.items()}
    thru = kit.thru(F)
    raw_thru = two_port.embed_two_port(terms, thru)
    leak = two_port.embed_two_port(terms, two_port.s_matrix(zero, zero, zero, zero))
    result: dict[str, object] = {}

    def ours() -> object:
        result["ours"] = two_port.solve_solt(F, {k: m[:, 0, 0] for k, m in measured.items()},
                                             {k: m[:, 1, 1] for k, m in measured.items()}, ideals, raw_thru, thru, leak)
        return result["ours"]

    def net(s: np.ndarray) -> skrf.Network:
        return skrf.Network(frequency=FREQUENCY, s=s)

    def library() -> object:
        cal = SOLT(measured=[net(measured[k]) for k in ideals] + [net(raw_thru)],
                   ideals=[net(v) for v in reflects.values()] + [net(thru)], n_thrus=1, isolation=net(leak))
        cal.run()
        result["library"] = cal.coefs
        return cal

    report("SOLT solve", ours, "SOLT.run", library, None, repeats=3)
    library_coefs = result["library"]
    worst = max(float(np.max(np.abs(value - library_coefs[f"{n.split('.')[0]} {n.split('.')[1].replace('_', ' ')}"])))
                for n, value in result["ours"].items())
    print(f"  agreement with SOLT.run: largest |difference| of any term {worst:.2e}")
    assert worst <= 1e-12, "the SOLT solves disagree"


def report(name: str, ours: Callable[[], object], library_name: str, library: Callable[[], object],
           goal: float | None, repeats: int = 20) -> None:
    ours()
    library()  # warm both
    t_ours, t_library = best_of(ours, repeats), best_of(library, repeats)
    goal_text = "" if goal is None else f" (goal <= {goal:g})"
    print(f"{name}, {POINTS} points:")
    print(f"  ours {t_ours * 1e3:.2f} ms, scikit-rf {library_name} {t_library * 1e3:.2f} ms, "
          f"ratio {t_ours / t_library:.3f}{goal_text}")
    print(f"  peak memory: ours {peak_bytes(ours) / 2**20:.1f} MiB, scikit-rf {peak_bytes(library) / 2**20:.1f} MiB")


if __name__ == "__main__":
    warnings.simplefilter("ignore", DeprecationWarning)
    one_port()
    two_port_processing()
    solt_solve()
