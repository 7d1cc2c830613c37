"""The formulas restructured for speed give what they gave before (tests/unit/formulas_before.py
keeps the earlier code): the uncertainty of a corrected reflection (one-port and with full
two-port data, with and without a termination and an interpolation), of |S21|, the 12-term
correction and the points of a band.  Equal to rounding: 1e-12 relative."""

from __future__ import annotations

import formulas_before as before
import numpy as np
import pytest

from lineproof import metrics, two_port
from lineproof.calibration import make_record
from lineproof.calkit import load_kit
from lineproof.decision import judge_extremes, judge_upper_limit
from lineproof.uncertainty import (
    UncertaintySettings,
    _median,
    _power,
    _quadratic_forms,
    add_specified_residuals,
    reflection_uncertainty,
    residual_model,
    transmission_model,
    transmission_uncertainty_db,
    transmission_uncertainty_traces_db,
)
from lineproof.values import BandLimit, InstrumentIdentity, SweepPlan

POINTS = 1001
PLAN = SweepPlan(1e6, 3e9, POINTS)
F = PLAN.frequencies()
RNG = np.random.default_rng(71)
EQUAL = {"rtol": 1e-12, "atol": 1e-15}


def phasor(scale: float, size: int = POINTS) -> np.ndarray:
    return scale * RNG.uniform(0.0, 1.0, size) * np.exp(1j * RNG.uniform(0, 2 * np.pi, size))


def residuals(settings: UncertaintySettings) -> dict[str, np.ndarray]:
    kit = load_kit("kits/n50-illustrative.toml")
    model = residual_model(kit, ("open", "short", "load"), F, settings)
    model.update(residual_model(kit, ("open", "short", "load"), F, settings, "port2"))
    model.update(transmission_model(kit, F, settings))
    # a check standard's excess on top, as a run adds it
    return add_specified_residuals(model, "port1", 1e-3, 2e-3, 3e-3)


SETTINGS = [UncertaintySettings(), UncertaintySettings(connection_repeatability=4e-4),
            UncertaintySettings(trace_noise=3e-5, coverage_factor=2.0),
            UncertaintySettings(connection_repeatability=1e-3, repeatability_reference_hz=5e8, trace_noise=1e-4)]


@pytest.mark.parametrize("settings", SETTINGS)
@pytest.mark.parametrize("termination", [None, 0.01, "trace"])
def test_reflection_uncertainty_is_unchanged(settings: UncertaintySettings, termination: object) -> None:
    # one-port readings; with full two-port data the vector itself was corrected (see
    # test_two_port_residuals.py) and the forms are held equal for any vector below
    model = residuals(settings)
    gamma = phasor(0.9)
    gamma[::97] = 0.0  # where arg Γ is undefined
    reach = np.abs(phasor(0.02)) if termination == "trace" else termination
    for interpolation in (None, 2e-4):
        new = reflection_uncertainty(model, gamma, F, settings, termination_reach=reach,  # type: ignore[arg-type]
                                     interpolation_error=interpolation)
        old = before.reflection_uncertainty(model, gamma, F, settings, termination_reach=reach,  # type: ignore[arg-type]
                                            interpolation_error=interpolation)
        np.testing.assert_allclose(new.standard_uncertainty, old.standard_uncertainty, **EQUAL)
        np.testing.assert_allclose(new.coverage_factor, old.coverage_factor, **EQUAL)
        np.testing.assert_allclose(new.expanded, old.expanded, **EQUAL)
        np.testing.assert_array_equal(new.magnitude, old.magnitude)
        assert set(new.budget) == set(old.budget)
        for name in new.budget:
            np.testing.assert_allclose(new.budget[name], old.budget[name], **EQUAL, err_msg=name)


@pytest.mark.parametrize("unit_first", [False, True])
def test_the_quadratic_forms_are_unchanged_for_any_vector(unit_first: bool) -> None:
    model = residuals(SETTINGS[1])
    v0, v1, v2 = (None if unit_first else phasor(1.5)), phasor(0.9), phasor(0.8)
    vector = np.stack([np.ones(POINTS, complex) if v0 is None else v0, v1, v2], axis=-1)
    for prefix in ("port1", "port2"):
        new = _quadratic_forms(model, prefix, v0, v1, v2)
        old = before._quadratic_forms(model, prefix, vector)
        for part_new, part_old in zip(new, old, strict=True):
            np.testing.assert_allclose(part_new, part_old, **EQUAL)


def test_reflection_uncertainty_without_a_residual_model_is_unchanged() -> None:
    gamma = phasor(0.5)
    new = reflection_uncertainty({}, gamma, F, SETTINGS[1])
    old = before.reflection_uncertainty({}, gamma, F, SETTINGS[1])
    np.testing.assert_allclose(new.standard_uncertainty, old.standard_uncertainty, **EQUAL)
    np.testing.assert_allclose(new.coverage_factor, old.coverage_factor, **EQUAL)


@pytest.mark.parametrize("settings", SETTINGS)
def test_transmission_uncertainty_is_unchanged(settings: UncertaintySettings) -> None:
    model = residuals(settings)
    s = two_port.s_matrix(phasor(0.3), phasor(1.0), phasor(1.0), phasor(0.3))
    old = before.transmission_uncertainty_db(model, s, settings)
    np.testing.assert_allclose(transmission_uncertainty_db(model, s, settings), old, **EQUAL)
    s11, s21, s22 = (np.ascontiguousarray(s[:, i, j]) for i, j in ((0, 0), (1, 0), (1, 1)))
    new = transmission_uncertainty_traces_db(model, s11, s21, s22, settings, s21_magnitude=np.abs(s21))
    np.testing.assert_allclose(new, old, **EQUAL)


def test_the_twelve_term_correction_is_unchanged() -> None:
    terms = {f"{d}.{t}": phasor(scale) for d in ("forward", "reverse") for t, scale in zip(
        before.TERMS, (0.05, 0.1, 0.9, 0.1, 0.9, 1e-5), strict=True)}
    for term in ("reflection_tracking", "transmission_tracking"):  # trackings stay away from zero
        for direction in ("forward", "reverse"):
            terms[f"{direction}.{term}"] += 0.5
    record = make_record("full two-port SOLT (12-term)", terms, F, PLAN, InstrumentIdentity("a", "b", "c", "d"),
                         "kit", "0" * 64, 50.0)
    raw = two_port.s_matrix(phasor(0.5), phasor(0.9), phasor(0.9), phasor(0.5))
    old = before.correct_two_port(terms, raw)
    np.testing.assert_allclose(two_port.correct_two_port(record, F, raw), old, **EQUAL)
    traces = [np.ascontiguousarray(raw[:, i, j]) for i, j in ((0, 0), (1, 0), (0, 1), (1, 1))]
    corrected = two_port.TwelveTermCorrection(record).apply(F, *traces)
    np.testing.assert_allclose(two_port.s_matrix(*corrected), old, **EQUAL)


@pytest.mark.parametrize(("start", "stop"), [(144e6, 148e6), (1e6, 3e9), (1e6, 1e6), (3e9, 3e9), (2.9e9, 3.1e9),
                                             (F[10], F[10]), (F[10] + 1.0, F[11] - 1.0), (F[5], F[9])])
def test_band_points_are_unchanged(start: float, stop: float) -> None:
    band = BandLimit("b", start, stop, 1.5)
    np.testing.assert_array_equal(metrics.band_indices(F, band), before.band_indices(F, band))


@pytest.mark.parametrize("rule", ["simple", "guard-banded", "guard-banded-binary"])
def test_judging_a_band_from_its_extremes_is_judging_every_point(rule: str) -> None:
    for _ in range(500):
        values = RNG.uniform(0.0, 0.2, RNG.integers(1, 12))
        u = RNG.uniform(0.0, 0.03, values.size)
        limit = float(RNG.uniform(0.05, 0.2))
        every_point = judge_upper_limit(values, limit, u, rule)  # type: ignore[arg-type]
        extremes = judge_extremes(float(values.max()), limit, rule,  # type: ignore[arg-type]
                                  float((values + u).max()), float((values - u).max()))
        assert extremes is every_point


@pytest.mark.parametrize("size", [1, 2, 5, 6, 1000, 1001])
def test_the_median_by_partition_is_numpys(size: int) -> None:
    for _ in range(20):
        values = RNG.rayleigh(1.0, size)
        assert _median(values.copy()) == np.median(values)
        if size > 2:
            values[RNG.integers(size)] = np.nan  # np.median gives NaN: so must this
            assert np.isnan(_median(values.copy()))


def test_the_power_of_a_contiguous_trace_is_that_of_a_strided_one() -> None:
    trace = phasor(1.0, 2 * POINTS)
    plain = trace.real * trace.real + trace.imag * trace.imag
    assert np.array_equal(_power(trace), plain)
    assert np.array_equal(_power(trace[::2]), plain[::2])  # not contiguous: the plain formula
