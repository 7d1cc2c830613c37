"""One-port calibration: solve and correct, against a textbook closed form and round trips."""

from __future__ import annotations

import numpy as np
import pytest

from lineproof import calibration
from lineproof.calkit import load_kit
from lineproof.errors import CalibrationError
from lineproof.values import InstrumentIdentity, SweepPlan

PLAN = SweepPlan(1e6, 3e9, 301)
IDENTITY = InstrumentIdentity("Test", "Model", "0", "0", "TCPIP::127.0.0.1::1::SOCKET")


def random_terms(rng: np.random.Generator, n: int) -> dict[str, np.ndarray]:
    """Raw error terms of realistic size: directivity ~ -25 dB, source match ~ -18 dB."""

    def phasor(scale: float) -> np.ndarray:
        return scale * rng.uniform(0.5, 1.5, n) * np.exp(1j * rng.uniform(0, 2 * np.pi, n))

    return {
        "directivity": phasor(0.056),
        "source_match": phasor(0.13),
        "reflection_tracking": phasor(0.85),
    }


def embed(terms: dict[str, np.ndarray], gamma: np.ndarray) -> np.ndarray:
    return terms["directivity"] + terms["reflection_tracking"] * gamma / (1 - terms["source_match"] * gamma)


def record(terms: dict[str, np.ndarray]) -> object:
    return calibration.make_record("test", terms, PLAN.frequencies(), PLAN, IDENTITY, "kit", "0" * 64, 50.0)


def test_solve_matches_textbook_closed_form_for_ideal_open_short_load() -> None:
    # With ideal standards (open +1, short -1, load 0) the three terms have the closed form
    #   e00 = ML,  e11 = (MO + MS - 2 ML) / (MO - MS),  e10e01 = 2 (MO - ML)(ML - MS) / (MO - MS)
    # (e.g. J. P. Dunsmore, "Handbook of Microwave Component Measurements", 2nd ed., one-port
    # SOL calibration; from memory).  scikit-rf's least-squares solve must agree.
    rng = np.random.default_rng(11)
    n = PLAN.points
    truth = random_terms(rng, n)
    ideals = {"open": np.ones(n, complex), "short": -np.ones(n, complex), "load": np.zeros(n, complex)}
    measured = {name: embed(truth, value) for name, value in ideals.items()}
    solved = calibration.solve_one_port(PLAN.frequencies(), measured, ideals)
    mo, ms, ml = measured["open"], measured["short"], measured["load"]
    np.testing.assert_allclose(solved["directivity"], ml, atol=1e-12)
    np.testing.assert_allclose(solved["source_match"], (mo + ms - 2 * ml) / (mo - ms), atol=1e-12)
    np.testing.assert_allclose(solved["reflection_tracking"], 2 * (mo - ml) * (ml - ms) / (mo - ms), atol=1e-12)
    for name in truth:
        np.testing.assert_allclose(solved[name], truth[name], atol=1e-12)


def test_round_trip_with_kit_models_recovers_any_reflection() -> None:
    rng = np.random.default_rng(12)
    f = PLAN.frequencies()
    kit = load_kit("kits/n50-illustrative.toml")
    truth = random_terms(rng, f.size)
    ideals = {kind: kit.ideal(kind, f) for kind in ("open", "short", "load")}
    measured = {kind: embed(truth, value) for kind, value in ideals.items()}
    cal = record(calibration.solve_one_port(f, measured, ideals))
    dut = rng.uniform(0, 0.99, f.size) * np.exp(1j * rng.uniform(0, 2 * np.pi, f.size))
    np.testing.assert_allclose(calibration.correct_one_port(cal, f, embed(truth, dut)), dut, atol=1e-11)


def test_correction_refuses_a_different_grid() -> None:
    rng = np.random.default_rng(13)
    cal = record(random_terms(rng, PLAN.points))
    other = SweepPlan(1e6, 3e9, 302).frequencies()
    with pytest.raises(CalibrationError, match="grid differs"):
        calibration.correct_one_port(cal, other, np.zeros(302, complex))
    shifted = PLAN.frequencies() + 1e3  # same length, different frequencies
    with pytest.raises(CalibrationError, match="grid differs"):
        calibration.correct_one_port(cal, shifted, np.zeros(PLAN.points, complex))


def test_standards_that_do_not_separate_the_terms_are_refused() -> None:
    n = PLAN.points
    truth = random_terms(np.random.default_rng(14), n)
    ideals = {"open": np.ones(n, complex), "short": np.ones(n, complex), "load": np.zeros(n, complex)}
    measured = {name: embed(truth, value) for name, value in ideals.items()}
    with pytest.raises(CalibrationError, match="do not separate"):
        calibration.solve_one_port(PLAN.frequencies(), measured, ideals)


def test_missing_standard_is_refused() -> None:
    n = PLAN.points
    ideals = {"open": np.ones(n, complex), "short": -np.ones(n, complex), "load": np.zeros(n, complex)}
    with pytest.raises(CalibrationError, match="missing load"):
        calibration.solve_one_port(PLAN.frequencies(), {"open": ideals["open"], "short": ideals["short"]}, ideals)


def test_closed_form_agrees_with_scikit_rf_on_kit_standards() -> None:
    # The vectorised solve of the three-standard system against scikit-rf's OnePort (a
    # reference library), with the kit's offset standards (not ideal +1/-1/0) as ideals.
    import skrf
    from skrf.calibration import OnePort

    rng = np.random.default_rng(21)
    f = PLAN.frequencies()
    kit = load_kit("kits/sma50-illustrative.toml")
    truth = random_terms(rng, f.size)
    ideals = {kind: kit.ideal(kind, f) for kind in ("open", "short", "load")}
    measured = {kind: embed(truth, value) for kind, value in ideals.items()}
    mine = calibration.solve_one_port(f, measured, ideals)
    frequency = skrf.Frequency.from_f(f, unit="Hz")
    reference = OnePort(measured=[skrf.Network(frequency=frequency, s=measured[k]) for k in ideals],
                        ideals=[skrf.Network(frequency=frequency, s=ideals[k]) for k in ideals])
    reference.run()
    for name, key in (("directivity", "directivity"), ("source_match", "source match"),
                      ("reflection_tracking", "reflection tracking")):
        np.testing.assert_allclose(mine[name], reference.coefs[key], atol=1e-12)
        np.testing.assert_allclose(mine[name], truth[name], atol=1e-12)


def test_four_standards_are_solved_by_least_squares() -> None:
    rng = np.random.default_rng(22)
    f = PLAN.frequencies()
    truth = random_terms(rng, f.size)
    ideals = {"open": np.ones(f.size, complex), "short": -np.ones(f.size, complex),
              "load": np.zeros(f.size, complex), "offset short": -np.exp(-2j * np.pi * f * 60e-12)}
    measured = {name: embed(truth, value) for name, value in ideals.items()}
    solved = calibration.solve_one_port(f, measured, ideals)
    for name in truth:
        np.testing.assert_allclose(solved[name], truth[name], atol=1e-10)


def test_standards_measured_on_different_grids_are_refused() -> None:
    n = PLAN.points
    ideals = {"open": np.ones(n, complex), "short": -np.ones(n, complex), "load": np.zeros(n, complex)}
    measured = dict(ideals)
    measured["load"] = np.zeros(n - 1, complex)
    with pytest.raises(CalibrationError, match="different grid.*same sweep plan"):
        calibration.solve_one_port(PLAN.frequencies(), measured, ideals)


@pytest.mark.parametrize(("paths", "wanted", "expected"), [
    ("reflection", None, calibration.ONE_PORT_METHOD),
    ("forward", None, calibration.ONE_PATH_METHOD),
    ("full", None, calibration.FULL_TWO_PORT_METHOD),
    ("full", "one-path", calibration.ONE_PATH_METHOD),
    ("forward", "thru-response", calibration.THRU_RESPONSE_METHOD),
    ("full", "one-port", calibration.ONE_PORT_METHOD),
])
def test_method_follows_what_the_analyzer_can_measure(paths: str, wanted: str | None, expected: str) -> None:
    assert calibration.choose_method(paths, wanted) == expected


def test_a_method_beyond_the_analyzer_is_refused() -> None:
    with pytest.raises(CalibrationError, match="measures forward paths only.*one-path"):
        calibration.choose_method("forward", "solt")
    with pytest.raises(CalibrationError, match="unknown calibration method"):
        calibration.choose_method("full", "trl")

