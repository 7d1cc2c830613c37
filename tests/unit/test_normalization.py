"""Thru response (normalization): the mismatch bounds against the published single-term
limits, against the 12-term model itself over random passive devices and error terms, and the
insertion-loss uncertainty built on them."""

from __future__ import annotations

import math

import numpy as np
import pytest

from lineproof import calibration, metrics, two_port
from lineproof.errors import CalibrationError
from lineproof.normalization import mismatch_bounds, normalize
from lineproof.uncertainty import UncertaintySettings
from lineproof.values import InstrumentIdentity, SweepPlan

PLAN = SweepPlan(10e6, 1e9, 201)
F = PLAN.frequencies()
FLUSH = (np.zeros(F.size, complex), np.ones(F.size, complex), np.zeros(F.size, complex))
SOURCE, LOAD = 0.18, 0.15  # |ΓS| and |ΓL|: raw match of 14.9 and 16.5 dB


def test_one_mismatch_term_gives_the_published_limits() -> None:
    # A VSWR 1.35 source (|Γ| 0.15) and a device input of |Γ| 0.2, the load ideal: mismatch
    # error limits +0.257 dB and -0.265 dB of the power transferred (the worked example of
    # tests/unit/test_uncertainty.py; 20 log10(1 ± |ΓA||ΓB|)).  The normalized reading is the
    # transfer's inverse: |S21n| / |S21| = 1 / |1 - ΓS S11|.
    bounds = mismatch_bounds(np.full(F.size, 0.9), 0.15, 0.0, FLUSH, device_match=0.2)
    assert 20 * np.log10(bounds.high) == pytest.approx(np.full(F.size, 0.265), abs=5e-4)
    assert 20 * np.log10(bounds.low) == pytest.approx(np.full(F.size, -0.257), abs=5e-4)


def passive_reciprocal(rng: np.random.Generator, size: int, stopband: bool = False) -> np.ndarray:
    """Random reciprocal passive two-ports: r Q Qᵀ with Q unitary is symmetric with norm r
    (Takagi's factorization); near-zero transmission when ``stopband``."""
    s = np.empty((size, 2, 2), complex)
    for i in range(size):
        z = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
        q, r = np.linalg.qr(z)
        q = q * (np.diag(r) / np.abs(np.diag(r)))
        if stopband:  # mostly reflecting: rotate so that transmission is small
            angle = rng.uniform(0, 0.15)
            q = np.array([[math.cos(angle), -math.sin(angle)], [math.sin(angle), math.cos(angle)]]) @ np.diag(
                np.exp(1j * rng.uniform(0, 2 * np.pi, 2)))
        s[i] = rng.uniform(0.9, 1.0) * q @ q.T
    return s


def through_model(s: np.ndarray, source: np.ndarray, load: np.ndarray, thru: np.ndarray) -> np.ndarray:
    """S21 normalized by a thru response, computed with the 12-term model itself (tracking and
    leakage included): embed the thru and the device, solve, correct."""
    n = s.shape[0]
    rng = np.random.default_rng(n)
    terms = {f"{d}.{t}": np.zeros(n, complex) for d in ("forward", "reverse") for t in two_port.DIRECTION_TERMS}
    terms.update({"forward.source_match": source, "forward.load_match": load,
                  "forward.reflection_tracking": np.ones(n, complex), "reverse.reflection_tracking": np.ones(n, complex),
                  "forward.transmission_tracking": 0.8 * np.exp(1j * rng.uniform(0, 6, n)),
                  "reverse.transmission_tracking": np.ones(n, complex)})
    f = np.linspace(1e6, 2e6, n)
    cal = calibration.make_record(calibration.THRU_RESPONSE_METHOD,
                                  two_port.solve_thru_response(two_port.embed_two_port(terms, thru)[:, 1, 0], thru), f,
                                  SweepPlan(1e6, 2e6, n), InstrumentIdentity("T", "M", "0", "0"), "kit", "0" * 64, 50.0)
    return two_port.correct_transmission(cal, f, two_port.embed_two_port(terms, s)[:, 1, 0])


@pytest.mark.parametrize("stopband", [False, True])
def test_the_bounds_hold_the_twelve_term_model(stopband: bool) -> None:
    rng = np.random.default_rng(7 + stopband)
    n = 4000
    s = passive_reciprocal(rng, n, stopband)
    source = SOURCE * rng.uniform(0.5, 1.0, n) * np.exp(1j * rng.uniform(0, 2 * np.pi, n))
    load = LOAD * rng.uniform(0.5, 1.0, n) * np.exp(1j * rng.uniform(0, 2 * np.pi, n))
    thru = two_port.s_matrix(np.zeros(n, complex), np.exp(-0.3j) * np.ones(n), np.exp(-0.3j) * np.ones(n),
                             np.zeros(n, complex))
    s21n = through_model(s, source, load, thru)
    bounds = mismatch_bounds(s21n, SOURCE, LOAD, (thru[:, 0, 0], thru[:, 1, 0] * thru[:, 0, 1], thru[:, 1, 1]))
    ratio = np.abs(s21n) / np.abs(s[:, 1, 0])
    assert np.all(ratio <= bounds.high * (1 + 1e-12)) and np.all(ratio >= bounds.low * (1 - 1e-12))
    assert np.all(np.abs(np.angle(s21n / s[:, 1, 0])) <= bounds.phase + 1e-12)
    assert np.all(bounds.device_match >= np.maximum(np.abs(s[:, 0, 0]), np.abs(s[:, 1, 1])) - 1e-12)


def test_the_bound_is_reached_where_the_device_reflects_nearly_everything() -> None:
    # A lossless filter 30 dB into its stopband, the raw match at its stated size and every
    # pair of phases: the largest error comes within 1 % of the bound (in dB) -- the bound is
    # the worst case, not a loose figure.
    t = 10 ** (-30 / 20)
    r = math.sqrt(1 - t * t)
    device = np.array([[r, t], [t, -r]])  # lossless and reciprocal: S S^H = I
    phases = np.exp(1j * np.linspace(0, 2 * np.pi, 181))
    source, load = (x.ravel() for x in np.meshgrid(SOURCE * phases, LOAD * phases))
    s = np.broadcast_to(device, (source.size, 2, 2)).copy()
    thru = two_port.s_matrix(np.zeros(source.size, complex), np.ones(source.size, complex),
                             np.ones(source.size, complex), np.zeros(source.size, complex))
    s21n = through_model(s, source, load, thru)
    bounds = mismatch_bounds(s21n, SOURCE, LOAD, (thru[:, 0, 0], thru[:, 1, 0] * thru[:, 0, 1], thru[:, 1, 1]))
    errors = metrics.insertion_loss_db(s21n) - metrics.insertion_loss_db(s[:, 1, 0])
    assert np.all(np.abs(errors) <= bounds.loss_db)
    assert np.max(np.abs(errors)) > 0.99 * np.min(bounds.loss_db)


def test_the_device_match_is_bounded_by_its_transmission_or_as_stated() -> None:
    # A passive device: |S11| <= sqrt(1 - |S21|²).  A 0.1 dB device is only bounded to about
    # 0.8 with 14 dB raw match (its transmission reading is itself uncertain by the mismatch);
    # a 30 dB stopband leaves |S11| near 1.  A device match stated (a data sheet's VSWR 1.2,
    # |Γ| 0.0909) narrows a well-matched device's bound to the size of the terms themselves.
    passband = mismatch_bounds(np.full(F.size, 10 ** (-0.1 / 20)), SOURCE, LOAD, FLUSH)
    stopband = mismatch_bounds(np.full(F.size, 10 ** (-30 / 20)), SOURCE, LOAD, FLUSH)
    stated = mismatch_bounds(np.full(F.size, 10 ** (-0.1 / 20)), SOURCE, LOAD, FLUSH, device_match=1 / 11)
    assert np.all(passband.device_match < 0.85) and np.all(stopband.device_match > 0.99)
    assert np.all(stopband.loss_db > passband.loss_db)
    # |D| >= (1 - 0.18 x 0.0909)(1 - 0.15 x 0.0909) - 0.18 x 0.15 x |S21|² (|S21| <= 1) and the
    # flush thru's |Dthru| <= 1 + 0.18 x 0.15: the larger side is 20 log10(|Dthru| / |D|)
    low = (1 - SOURCE / 11) * (1 - LOAD / 11) - SOURCE * LOAD
    np.testing.assert_allclose(stated.loss_db, 20 * math.log10((1 + SOURCE * LOAD) / low), rtol=1e-12)


def test_normalize_states_the_mismatch_it_leaves() -> None:
    rng = np.random.default_rng(3)
    source = SOURCE * np.exp(1j * rng.uniform(0, 2 * np.pi, F.size))
    load = LOAD * np.exp(1j * rng.uniform(0, 2 * np.pi, F.size))
    thru = two_port.s_matrix(*FLUSH[:1], np.ones(F.size, complex), np.ones(F.size, complex), FLUSH[2])
    device = passive_reciprocal(rng, F.size, stopband=True)
    terms = {f"{d}.{t}": np.zeros(F.size, complex) for d in ("forward", "reverse") for t in two_port.DIRECTION_TERMS}
    terms.update({"forward.source_match": source, "forward.load_match": load,
                  "forward.transmission_tracking": np.full(F.size, 0.7 + 0.2j),
                  "reverse.transmission_tracking": np.ones(F.size, complex)})
    cal = calibration.make_record(calibration.THRU_RESPONSE_METHOD,
                                  two_port.solve_thru_response(two_port.embed_two_port(terms, thru)[:, 1, 0], thru), F,
                                  PLAN, InstrumentIdentity("T", "M", "0", "0"), "kit", "0" * 64, 50.0,
                                  {"thru.s11": FLUSH[0], "thru.s21s12": FLUSH[1], "thru.s22": FLUSH[2]})
    raw = two_port.embed_two_port(terms, device)[:, 1, 0]
    settings = UncertaintySettings(trace_noise=0.0, raw_source_match=SOURCE, raw_load_match=LOAD)
    found = normalize(cal, F, raw, settings)
    error = np.abs(found.loss_db - metrics.insertion_loss_db(device[:, 1, 0]))
    assert np.all(error <= found.loss_expanded_db)
    # the bounded term alone sets k: 1.4106, the 95.45 % quantile of a U-shape of unit variance
    # (sin(0.9545 π/2) √2), so U is 0.9975 of the worst case
    np.testing.assert_allclose(found.loss_expanded_db, 0.9975 * found.bounds.loss_db, rtol=1e-3)
    assert np.all(np.abs(np.angle(found.s21 / device[:, 1, 0])) <= found.phase_expanded_rad)
    with pytest.raises(CalibrationError, match="raw_source_match_db and raw_load_match_db"):
        normalize(cal, F, raw, UncertaintySettings())


def test_a_moved_calibrations_estimate_widens_the_transmission_uncertainty() -> None:
    # A reused calibration interpolated onto a sweep carries the interpolation's own estimate e
    # (relative, of unknown phase: u = e/√2).  It adds to the insertion-loss uncertainty of a
    # SOLT correction in quadrature (k = 2 there) and of a thru response beside the mismatch.
    from dataclasses import replace

    from lineproof.calkit import load_kit
    from lineproof.figures import INSERTION_LOSS, two_port_figures
    from lineproof.uncertainty import residual_model, transmission_model

    kit = load_kit("kits/n50-illustrative.toml")
    settings = UncertaintySettings(trace_noise=1e-4, raw_source_match=SOURCE, raw_load_match=LOAD)
    residuals = {**residual_model(kit, ("open", "short", "load"), F, settings, "port1"),
                 **residual_model(kit, ("open", "short", "load"), F, settings, "port2"),
                 **transmission_model(kit, F, settings)}
    terms = {f"{d}.{t}": np.full(F.size, 0.1 + 0j) for d in ("forward", "reverse") for t in two_port.DIRECTION_TERMS}
    solt = calibration.make_record(calibration.FULL_TWO_PORT_METHOD, terms, F, PLAN,
                                   InstrumentIdentity("T", "M", "0", "0"), "kit", "0" * 64, 50.0, residuals)
    s = passive_reciprocal(np.random.default_rng(5), F.size)
    traces = (s[:, 0, 0], s[:, 1, 0], s[:, 0, 1], s[:, 1, 1])

    def loss_u(cal: object) -> np.ndarray:
        return next(t for t in two_port_figures(cal, F, traces, settings) if t.name == INSERTION_LOSS).expanded

    added = np.sqrt(loss_u(replace(solt, interpolation_error=0.01)) ** 2 - loss_u(solt) ** 2)
    np.testing.assert_allclose(added, 2 * 20 / math.log(10) * 0.01 / math.sqrt(2), rtol=1e-9)
    thru = calibration.make_record(calibration.THRU_RESPONSE_METHOD, {"forward.transmission_tracking": np.ones(F.size)},
                                   F, PLAN, InstrumentIdentity("T", "M", "0", "0"), "kit", "0" * 64, 50.0, residuals)
    plain = normalize(thru, F, s[:, 1, 0], settings, device_match=0.05)
    moved = normalize(replace(thru, interpolation_error=0.01), F, s[:, 1, 0], settings, device_match=0.05)
    assert np.all(moved.loss_expanded_db > plain.loss_expanded_db)
    assert np.all(moved.phase_expanded_rad > plain.phase_expanded_rad)
