"""The uncertainty model: published mismatch formulas and worked examples, the coverage-factor
table against Monte Carlo, and the first-order residual model against actual calibrations
with perturbed standards."""

from __future__ import annotations

import math

import numpy as np
import pytest

from lineproof import calibration
from lineproof.calkit import ideal_reflection, load_kit, varied
from lineproof.simulators import objects as sim_objects
from lineproof.uncertainty import (
    UncertaintySettings,
    cascaded_vswr_bounds,
    coverage_factor,
    estimate_trace_noise,
    load_reflection_variance,
    mismatch_limits_db,
    mismatch_standard_uncertainty,
    reflection_uncertainty,
    residual_model,
    termination_bound,
)

F = np.linspace(1e6, 3e9, 61)


@pytest.mark.parametrize(("gamma_1", "gamma_2", "percent", "db"), [
    ((1.5 - 1) / (1.5 + 1), (1.2 - 1) / (1.2 + 1), 3.64, 0.155),  # VSWR 1.5:1 generator, 1.2:1 sensor
    (10 ** (-20 / 20), 10 ** (-23 / 20), 1.41, 0.061),           # return losses 20 dB and 23 dB
])
def test_mismatch_limits_against_published_worked_examples(gamma_1: float, gamma_2: float, percent: float,
                                                           db: float) -> None:
    # T. Lymer, "Calculating Mismatch Uncertainty", Microwave Journal, 15 May 2008, Examples 1
    # and 2: ±3.64 % or ±0.155 dB, and ±1.41 % or ±0.061 dB.  The article's figures are the
    # binomial series of the power ratio cut after two terms, ±200 |Γ1||Γ2| %: the mean of the
    # exact upper and lower limits (in %) is that term, to the article's rounding of |Γ| to
    # three places; each limit differs from it by the dropped |Γ1 Γ2|² (computed from the
    # formula 20 log10(1 ± |Γ1||Γ2|) the function states).  In dB the article gives one figure
    # for both signs; the limits differ from it by its rounding and the dropped terms (measured
    # here: 0.0015 dB above, 0.0044 dB below at most).
    plus, minus = mismatch_limits_db(gamma_1, gamma_2)
    up, down = 100 * (10 ** (plus / 10) - 1), 100 * (1 - 10 ** (minus / 10))
    assert (up + down) / 2 == pytest.approx(percent, abs=0.01)
    assert (up - down) / 2 == pytest.approx(100 * (gamma_1 * gamma_2) ** 2, rel=1e-9)
    assert plus == pytest.approx(db, abs=0.002)
    assert minus == pytest.approx(-db, abs=0.005)


def test_cascaded_vswr_worked_example() -> None:
    # RF Cafe, "VSWR & Mismatch" (rfcafe.com/references/electrical/vswr-mismatch.htm): VSWR 2.5
    # and 2.0 in cascade give VSWR_MAX = 2.5 x 2.0 = 5.0 and VSWR_MIN = 2.5 / 2.0 = 1.25.
    assert cascaded_vswr_bounds(2.5, 2.0) == pytest.approx((1.25, 5.0))
    assert cascaded_vswr_bounds(2.0, 2.5) == pytest.approx((1.25, 5.0))


def test_cascade_bounds_hold_for_any_phase() -> None:
    # The product/quotient rule as the extremes of two reflections combined at every phase.
    g1, g2 = 0.2, 0.1  # VSWR 1.5 and 1.222
    phases = np.linspace(0, 2 * np.pi, 3601)
    combined = np.abs((g1 + g2 * np.exp(1j * phases)) / (1 + g1 * g2 * np.exp(1j * phases)))
    vswr = (1 + combined) / (1 - combined)
    low, high = cascaded_vswr_bounds(1.5, 1.1 / 0.9)
    assert vswr.min() == pytest.approx(low, rel=1e-6) and vswr.max() == pytest.approx(high, rel=1e-6)


def test_u_shaped_standard_uncertainty() -> None:
    # I. A. Harris and F. L. Warner, "Re-examination of mismatch uncertainty when measuring
    # microwave power and attenuation", IEE Proc. H 128(1), pp. 35-41, 1981 (doi
    # 10.1049/ip-h-1.1981.0007): with the phases unknown, the mismatch term |Γ1||Γ2| cos φ is
    # U-shaped.  Its standard deviation, half-width / sqrt(2) (the arcsine distribution's; from
    # memory), is checked here against the projection of a vector of that magnitude at
    # uniformly random phase (numpy).
    assert mismatch_standard_uncertainty(0.2, 0.15) == pytest.approx(0.03 / math.sqrt(2))
    phases = np.random.default_rng(1).uniform(0, 2 * np.pi, 400_000)
    assert np.std(0.03 * np.cos(phases)) == pytest.approx(0.03 / math.sqrt(2), rel=5e-3)


@pytest.mark.parametrize(("share", "spread"), [(0.0, 1.0), (0.5, 1.0), (0.8, 0.6), (0.9, 0.2), (0.95, 0.5),
                                                (1.0, 1.0), (1.0, 0.56), (0.7, 0.0)])
def test_coverage_table_against_monte_carlo(share: float, spread: float) -> None:
    # Independent check of the table (numerical integration) by Monte Carlo (GUM Supplement 1
    # style): the 95.45 % quantile of |r·Y + sqrt(1-r²)·Z|.
    rng = np.random.default_rng(2)
    n = 1_000_000
    y = rng.uniform(spread, 1.0, n) * np.cos(rng.uniform(0, 2 * np.pi, n))
    x = share * y / y.std() + math.sqrt(1 - share**2) * rng.standard_normal(n)
    expected = np.quantile(np.abs(x), math.erf(2 / math.sqrt(2)))
    assert float(coverage_factor(np.array([share]), spread)[0]) == pytest.approx(expected, abs=0.012)


def test_load_statement_variance() -> None:
    kit = load_kit("kits/n50-illustrative.toml")  # load between 40 and 45 dB return loss
    x = np.linspace(40, 45, 100001)
    assert load_reflection_variance(kit) == pytest.approx(np.mean(10 ** (-x / 10)), rel=1e-5)


def _calibrate(kit, actual: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(3)
    e00 = 0.05 * np.exp(1j * rng.uniform(0, 6.3, F.size))
    e11 = 0.1 * np.exp(1j * rng.uniform(0, 6.3, F.size))
    e01 = 0.8 * np.exp(1j * rng.uniform(0, 6.3, F.size))
    measured = {k: calibration.embed_reflection(e00, e11, e01, v) for k, v in actual.items()}
    terms = calibration.solve_one_port(F, measured, {k: kit.ideal(k, F) for k in actual})
    return {"terms": terms, "raw": (e00, e11, e01)}


def test_residual_model_matches_monte_carlo_of_actual_calibrations() -> None:
    # Truth-based: draw actual standards from the kit's own statement (delays, capacitance,
    # inductance normal; the load's reflection at uniform phase with return loss spread
    # between the stated figures), calibrate with the nominal models, measure a device, and
    # compare the spread of the error with the model's variance and pseudo-variance.
    kit = load_kit("kits/n50-illustrative.toml")
    statement = kit.uncertainty
    rng = np.random.default_rng(4)
    device = sim_objects.termination("dut", 14.0, 1.2e-9, 0.4e-12).response(F)
    errors = []
    for _ in range(1500):
        open_ = kit.standard("open")
        short = kit.standard("short")
        open_actual = varied(open_, offset_delay_s=open_.offset_delay_s + rng.normal(0, statement.open_delay_uncertainty_s),
                             coefficients=tuple(c * (1 + rng.normal(0, statement.open_capacitance_uncertainty))
                                                for c in open_.coefficients))
        c = short.coefficients
        short_actual = varied(short, offset_delay_s=short.offset_delay_s + rng.normal(0, statement.short_delay_uncertainty_s),
                              coefficients=(c[0] + rng.normal(0, statement.short_inductance_uncertainty_h), c[1], c[2], c[3]))
        rho = 10 ** (-rng.uniform(statement.load_return_loss_db, statement.load_return_loss_best_db) / 20)
        actual = {"open": ideal_reflection(open_actual, F, 50.0), "short": ideal_reflection(short_actual, F, 50.0),
                  "load": rho * np.exp(1j * rng.uniform(0, 2 * np.pi)) * np.ones(F.size)}
        solved = _calibrate(kit, actual)
        e00, e11, e01 = solved["raw"]
        raw = calibration.embed_reflection(e00, e11, e01, device)
        t = solved["terms"]
        errors.append(calibration.correct_reflection(t["directivity"], t["source_match"], t["reflection_tracking"], raw) - device)
    e = np.array(errors)
    model = residual_model(kit, ("open", "short", "load"), F, UncertaintySettings())
    vector = np.stack([np.ones_like(device), device, device**2], axis=-1)
    variance = np.einsum("nj,njk,nk->n", np.conj(vector), model["port1.variance"], vector).real
    pseudo = np.einsum("nj,njk,nk->n", vector, model["port1.pseudo_variance"], vector)
    np.testing.assert_allclose(np.mean(np.abs(e) ** 2, axis=0), variance, rtol=0.1)
    np.testing.assert_allclose(np.mean(e**2, axis=0), pseudo, atol=0.15 * np.max(np.abs(pseudo)))
    spread = reflection_uncertainty(model, device, F, UncertaintySettings(trace_noise=0.0))
    radial = (e * np.exp(-1j * np.angle(device))).real
    np.testing.assert_allclose(np.std(radial, axis=0), spread.standard_uncertainty, rtol=0.1)


def test_termination_bound_holds_for_passive_devices() -> None:
    # |Γin - S11| = |S21 S12 ΓL / (1 - S22 ΓL)| <= (1 - |S11|²) ρL / (1 - ρL) for passive
    # reciprocal two-ports: random lossy ladders built by the simulator's own circuit code.
    rng = np.random.default_rng(5)
    f = np.linspace(10e6, 3e9, 300)
    for _ in range(40):
        elements = [{"element": "series_inductor", "henry": rng.uniform(0, 30e-9)},
                    {"element": "shunt_capacitor", "farad": rng.uniform(0, 8e-12)},
                    {"element": "line", "ohm": rng.uniform(30, 80), "delay_s": rng.uniform(0, 1e-9),
                     "loss_ohm_per_s": rng.uniform(0, 5e9)},
                    {"element": "series_resistor", "ohm": rng.uniform(0, 10)}]
        s = sim_objects.ladder_s(elements, f)
        rho = rng.uniform(0, 0.3)
        load = rho * np.exp(1j * rng.uniform(0, 2 * np.pi, f.size))
        change = np.abs(s[:, 1, 0] * s[:, 0, 1] * load / (1 - s[:, 1, 1] * load))
        assert np.all(change <= termination_bound(s[:, 0, 0], rho) * (1 + 1e-9))


def test_trace_noise_estimate_on_a_smooth_trace() -> None:
    rng = np.random.default_rng(6)
    f = np.linspace(100e6, 500e6, 2001)
    smooth = 0.2 * np.exp(-2j * np.pi * f * 1e-9)
    noisy = smooth + 3e-4 * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size))
    assert estimate_trace_noise(noisy) == pytest.approx(3e-4, rel=0.06)


def test_budget_parts_and_a_fixed_coverage_factor() -> None:
    kit = load_kit("kits/n50-illustrative.toml")
    settings = UncertaintySettings(connection_repeatability=3e-4, trace_noise=1e-4, coverage_factor=2.0)
    model = residual_model(kit, ("open", "short", "load"), F, settings)
    gamma = 0.1 * np.exp(1j * F / 1e9)
    spread = reflection_uncertainty(model, gamma, F, settings, termination_reach=0.01, interpolation_error=2e-4)
    assert set(spread.budget) == {"calibration (load standard)", "calibration (other standards)", "noise",
                                  "connection", "termination", "interpolation"}
    np.testing.assert_allclose(spread.coverage_factor, 2.0)
    np.testing.assert_allclose(spread.standard_uncertainty ** 2, sum(p**2 for p in spread.budget.values()))
    np.testing.assert_allclose(spread.budget["termination"], 0.99 * 0.01 / 0.99 / math.sqrt(2))
    low, high = spread.vswr_interval()
    assert np.all(low <= (1 + 0.1) / (1 - 0.1)) and np.all(high >= (1 + 0.1) / (1 - 0.1))
    # left to the distribution, k falls below 2 where the load's bounded reflection dominates
    free = reflection_uncertainty(model, gamma, F, UncertaintySettings())
    assert np.all(free.coverage_factor <= 2.0) and np.min(free.coverage_factor) < 1.9


def test_a_check_standard_widens_an_understated_model() -> None:
    # Truth-based: the actual load is far worse (26 dB return loss) than the kit states
    # (40-45 dB).  A check standard of known reflection shows a deviation the model does not
    # explain; the excess, added as D, T, M bounds, makes the interval cover it again.
    from lineproof.uncertainty import add_specified_residuals, residuals_from_check_standard

    kit = load_kit("kits/n50-illustrative.toml")
    actual = {kind: kit.ideal(kind, F) for kind in ("open", "short", "load")}
    actual["load"] = actual["load"] + 0.05 * np.exp(1j * F / 2e8)
    solved = _calibrate(kit, actual)
    e00, e11, e01 = solved["raw"]
    t = solved["terms"]
    check = 0.3 * np.exp(-2j * np.pi * F * 0.2e-9)  # a known mismatch (its data from elsewhere)
    read = calibration.correct_reflection(t["directivity"], t["source_match"], t["reflection_tracking"],
                                          calibration.embed_reflection(e00, e11, e01, check))
    settings = UncertaintySettings(trace_noise=0.0, coverage_factor=2.0)
    model = residual_model(kit, ("open", "short", "load"), F, settings)
    before = reflection_uncertainty(model, read, F, settings)
    assert np.any(np.abs(np.abs(read) - np.abs(check)) > before.expanded)  # the model is caught out
    bound = residuals_from_check_standard(check, read, before.standard_uncertainty)
    widened = add_specified_residuals(model, "port1", bound, bound, bound)
    after = reflection_uncertainty(widened, read, F, settings)
    assert np.all(after.lower <= np.abs(check)) and np.all(np.abs(check) <= after.upper)
    assert np.all(after.standard_uncertainty >= before.standard_uncertainty)
