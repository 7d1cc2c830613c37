"""Two-port calibration: SOLT and one-path solves against scikit-rf's own algorithms, 12-term
correction round trips, thru response and grids (a 75-ohm system: test_seventy_five_ohm.py)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import skrf
from skrf.calibration import SOLT, TwelveTerm, TwoPortOnePath

from lineproof import calibration, two_port
from lineproof.calkit import StandardDefinition, load_kit, thru_s
from lineproof.errors import CalibrationError
from lineproof.values import InstrumentIdentity, SweepPlan

PLAN = SweepPlan(1e6, 3e9, 401)
F = PLAN.frequencies()
IDENTITY = InstrumentIdentity("Test", "Model", "0", "0")


def random_terms(seed: int, one_path: bool = False) -> dict[str, np.ndarray]:
    """Raw twelve terms of realistic size, random in phase at every point."""
    rng = np.random.default_rng(seed)

    def phasor(scale: float) -> np.ndarray:
        return scale * rng.uniform(0.5, 1.5, F.size) * np.exp(1j * rng.uniform(0, 2 * np.pi, F.size))

    terms: dict[str, np.ndarray] = {}
    for direction in ("forward", "reverse"):
        if one_path and direction == "reverse":
            terms.update({f"reverse.{k.split('.')[1]}": v for k, v in terms.items() if k.startswith("forward.")})
            continue
        terms.update({f"{direction}.directivity": phasor(0.05), f"{direction}.source_match": phasor(0.12),
                      f"{direction}.reflection_tracking": phasor(0.85), f"{direction}.load_match": phasor(0.1),
                      f"{direction}.transmission_tracking": phasor(0.85), f"{direction}.isolation": phasor(1e-4)})
    return terms


def random_device(seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.uniform(0, 0.9, (F.size, 2, 2)) * np.exp(1j * rng.uniform(0, 2 * np.pi, (F.size, 2, 2)))


def reflects(gamma: np.ndarray) -> np.ndarray:
    zero = np.zeros(F.size, complex)
    return two_port.s_matrix(gamma, zero, zero, gamma)


def network(s: np.ndarray) -> skrf.Network:
    return skrf.Network(frequency=skrf.Frequency.from_f(F, unit="Hz"), s=s)


def record(terms: dict[str, np.ndarray], z0: float = 50.0) -> object:
    return calibration.make_record(calibration.FULL_TWO_PORT_METHOD, terms, F, PLAN, IDENTITY, "kit", "0" * 64, z0)


@pytest.fixture
def standards() -> tuple[dict[str, np.ndarray], np.ndarray]:
    kit = load_kit("kits/n50-illustrative.toml")
    ideals = {kind: kit.ideal(kind, F) for kind in ("open", "short", "load")}
    # a thru with length and loss, so the non-flush formulas are exercised
    return ideals, thru_s(StandardDefinition("line", "thru", 85e-12, 1.5e9, 50.0), F, 50.0)


def test_solt_agrees_with_scikit_rf_to_1e_12(standards: tuple[dict[str, np.ndarray], np.ndarray]) -> None:
    ideals, thru = standards
    truth = random_terms(31)
    measured = {k: two_port.embed_two_port(truth, reflects(v)) for k, v in ideals.items()}
    raw_thru = two_port.embed_two_port(truth, thru)
    leakage = two_port.embed_two_port(truth, reflects(np.zeros(F.size, complex)))
    mine = two_port.solve_solt(F, {k: m[:, 0, 0] for k, m in measured.items()},
                               {k: m[:, 1, 1] for k, m in measured.items()}, ideals, raw_thru, thru, leakage)
    # scikit-rf's SOLT (TwelveTerm.run), a reference implementation of the same published method
    reference = SOLT(measured=[network(measured[k]) for k in ideals] + [network(raw_thru)],
                     ideals=[network(reflects(v)) for v in ideals.values()] + [network(thru)],
                     n_thrus=1, isolation=network(leakage))
    reference.run()
    for name in two_port.TWO_PORT_TERMS:
        direction, term = name.split(".")
        np.testing.assert_allclose(mine[name], reference.coefs[f"{direction} {term.replace('_', ' ')}"],
                                   rtol=0, atol=1e-12, err_msg=name)
        np.testing.assert_allclose(mine[name], truth[name], rtol=0, atol=1e-12, err_msg=name)


def test_one_path_agrees_with_scikit_rf(standards: tuple[dict[str, np.ndarray], np.ndarray]) -> None:
    ideals, thru = standards
    truth = random_terms(32, one_path=True)
    for direction in ("forward", "reverse"):  # scikit-rf's one-path has no isolation
        truth[f"{direction}.isolation"] = np.zeros(F.size, complex)
    measured = {k: two_port.embed_two_port(truth, reflects(v)) for k, v in ideals.items()}
    raw_thru = two_port.embed_two_port(truth, thru)
    mine = two_port.solve_one_path(F, {k: m[:, 0, 0] for k, m in measured.items()}, ideals,
                                   raw_thru[:, 0, 0], raw_thru[:, 1, 0], thru)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # scikit-rf warns that it guesses nothing here; we give n_thrus
        reference = TwoPortOnePath(measured=[network(measured[k]) for k in ideals] + [network(raw_thru)],
                                   ideals=[network(reflects(v)) for v in ideals.values()] + [network(thru)],
                                   n_thrus=1)
        reference.run()
    for name in two_port.TWO_PORT_TERMS:
        direction, term = name.split(".")
        np.testing.assert_allclose(mine[name], reference.coefs[f"{direction} {term.replace('_', ' ')}"],
                                   atol=1e-12, err_msg=name)
    # A one-path analyzer turns the device round: the composite is corrected exactly.
    device = random_device(33)
    forward = two_port.embed_two_port(truth, device)
    turned = two_port.embed_two_port(truth, two_port.flipped(device))
    composite = two_port.compose_one_path((forward[:, 0, 0], forward[:, 1, 0]), (turned[:, 0, 0], turned[:, 1, 0]))
    np.testing.assert_allclose(two_port.correct_two_port(record(mine), F, composite), device, atol=1e-11)


def test_correction_round_trip_and_scikit_rf_apply_cal() -> None:
    # apply_cal(embed(x)) == x, and the same numbers as scikit-rf's TwelveTerm.apply_cal.
    truth = random_terms(34)
    device = random_device(35)
    raw = two_port.embed_two_port(truth, device)
    mine = two_port.correct_two_port(record(truth), F, raw)
    np.testing.assert_allclose(mine, device, atol=1e-11)
    coefs = {f"{k.split('.')[0]} {k.split('.')[1].replace('_', ' ')}": v for k, v in truth.items()}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reference = TwelveTerm.from_coefs(skrf.Frequency.from_f(F, unit="Hz"), coefs, n_thrus=1)
    np.testing.assert_allclose(reference.embed(network(device)).s, raw, atol=1e-12)
    np.testing.assert_allclose(reference.apply_cal(network(raw)).s, mine, atol=1e-11)


def test_thru_response_normalizes_transmission(standards: tuple[dict[str, np.ndarray], np.ndarray]) -> None:
    _, thru = standards
    tracking = 0.8 * np.exp(-2j * np.pi * F * 3e-9)
    terms = two_port.solve_thru_response(tracking * thru[:, 1, 0], thru)
    cal = calibration.make_record(calibration.THRU_RESPONSE_METHOD, terms, F, PLAN, IDENTITY, "k", "0" * 64, 50.0)
    s21 = 0.5 * np.exp(-1j * F / 1e9)
    np.testing.assert_allclose(two_port.correct_transmission(cal, F, tracking * s21), s21, atol=1e-14)


def test_same_length_grid_at_other_frequencies_is_refused() -> None:
    # scikit-rf 2.2's SOLT.apply_cal accepts this silently; a calibration applies on its grid only.
    cal = record(random_terms(36))
    with pytest.raises(CalibrationError, match="grid differs"):
        two_port.correct_two_port(cal, F * 1.001, random_device(37))


def test_missing_terms_are_named() -> None:
    terms = random_terms(38)
    del terms["reverse.load_match"]
    with pytest.raises(CalibrationError, match="reverse.load_match"):
        two_port.correct_two_port(record(terms), F, random_device(39))


def test_terminated_reflection_matches_scikit_rf() -> None:
    device = random_device(41)
    load = 0.2 * np.exp(1j * F / 1e8)
    expected = (network(device) ** skrf.Network(frequency=skrf.Frequency.from_f(F, unit="Hz"), s=load)).s[:, 0, 0]
    np.testing.assert_allclose(two_port.terminated_reflection(device, load), expected, atol=1e-12)
