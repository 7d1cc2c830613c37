"""Control charts of a check standard's history: limits, pooling and run rules against published
values and general-purpose libraries.

The formulas, as the NIST/SEMATECH e-Handbook of Statistical Methods states them (its pages
found and read with the search tool): the limits C̄ ± t(1-α/2; K-1)·s2 in §2.3.5.2 ("Control of
bias and long-term variability"), the precision limit s1·sqrt(F(α; J-1, K(J-1))) in §2.2.3.1
("Control chart for standard deviations").  No published worked example with the limits
themselves computed could be found: §2.3.5.1.1 (a balance's precision chart from 117
calibrations pooled to 351 degrees of freedom at the 1 % level) gives its limit as a plot and
the Dataplot commands that draw it, not a number, and §2.6.2.2's worked table of a check
standard (J = 6, K = 5) does not show its numbers in the excerpts available here.  So the
limits are checked piece by piece: the baseline's centre, s2 and pooled s1 against USP <1010>'s
worked example (runs as occasions), the pooled repeatability against the e-Handbook's own
pooling examples (§2.4.4.4, §2.4.4.3), the t and F factors against published tables and scipy,
and the run rules on series whose answer is known by construction.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from lineproof.control_chart import (
    BEYOND_LIMITS,
    EIGHT_ON_ONE_SIDE,
    FOUR_OF_FIVE,
    SIX_TRENDING,
    SPREAD_TOO_WIDE,
    TWO_OF_THREE,
    Baseline,
    ChartPoint,
    baseline_indices,
    judge_series,
    limit_factor,
    make_baseline,
    occasions,
    pooled_standard_deviation,
    precision_limit,
    run_rule_signals,
)


def test_a_baseline_matches_a_published_worked_example() -> None:
    # USP <1010> "Analytical Data -- Interpretation and Treatment" (USP 29-NF 24), its worked
    # one-way example: five runs (the occasions) of three replicates.  Published: the mean of all
    # 100.96; within runs MS 0.102 on 10 degrees of freedom (the pooled s1 squared); "1 run of 3
    # replicates": variance of the mean 1.183, SD 1.088 -- the variance of a run's mean, MS
    # between / 3, which the run means' sample standard deviation s2 estimates.
    runs = [[100.70, 101.05, 101.15], [99.46, 99.37, 99.59], [99.96, 100.17, 101.01],
            [101.80, 102.16, 102.44], [101.91, 102.00, 101.67]]
    points = [ChartPoint(float(np.mean(r)), float(np.std(r, ddof=1)), 3, f"run-{n}") for n, r in enumerate(runs)]
    base = make_baseline(points)
    assert base.center == pytest.approx(100.96, abs=5e-3)
    assert base.process_std == pytest.approx(1.088, abs=5e-4) and base.process_std**2 == pytest.approx(1.183, abs=5e-4)
    assert base.pooled_std**2 == pytest.approx(0.102, abs=5e-4) and base.pooled_dof == 10  # type: ignore[operator]
    # The limits from it (e-Handbook §2.3.5.2): no published figure; t(0.99865; 4) from scipy.
    assert base.upper - base.center == pytest.approx(stats.t.ppf(1 - 0.0027 / 2, 4) * base.process_std)


def test_pooled_repeatability_matches_the_handbooks_worked_example() -> None:
    # NIST/SEMATECH e-Handbook of Statistical Methods §2.4.4.4 ("Example of calculations"):
    # repeatability sums of squares of five wafers (#138-#142), 60 degrees of freedom each,
    # SUM 3.17635 over 300 degrees of freedom -> s1 = 0.10290 ohm.cm.
    sums_of_squares = [0.48115, 0.69209, 0.48483, 1.21752, 0.30076]
    std_devs = [math.sqrt(ss / 60) for ss in sums_of_squares]
    pooled, dof = pooled_standard_deviation(std_devs, [60] * 5)
    assert dof == 300
    assert pooled == pytest.approx(0.10290, abs=5e-6)
    # §2.4.4.3 ("Analysis of stability"): level-3 standard deviations of five check standards,
    # one degree of freedom each -- 0.0223, 0.0027, 0.0289, 0.0133, 0.0205 -- pooled to 0.0197.
    pooled, dof = pooled_standard_deviation([0.0223, 0.0027, 0.0289, 0.0133, 0.0205], [1] * 5)
    assert dof == 5 and pooled == pytest.approx(0.0197, abs=5e-5)


@pytest.mark.parametrize(("count", "alpha", "published"), [
    # The limits' factor t(1 - alpha/2; K - 1) (e-Handbook §2.3.5.2).  Upper critical values of Student's t with 9 degrees of freedom: 2.262 at 0.025 and 3.250
    # at 0.005 in one tail (the t table of the NIST/SEMATECH e-Handbook §1.3.6.7.2, as printed
    # in its reproductions; the same figures are in Fisher's tables).
    (10, 0.05, 2.262),
    (10, 0.01, 3.250),
    # 4 degrees of freedom, 0.025: 2.776 (same table).
    (5, 0.05, 2.776),
])
def test_the_limit_factor_is_the_t_quantile(count: int, alpha: float, published: float) -> None:
    assert limit_factor(count, alpha) == pytest.approx(published, abs=6e-4)


def test_the_default_limits_tend_to_three_sigma_and_agree_with_scipy() -> None:
    for count in (5, 10, 30, 1000):
        # scipy's t distribution as the reference library.
        assert limit_factor(count) == pytest.approx(stats.t.ppf(1 - 0.0027 / 2, count - 1), rel=1e-12)
    # As the baseline grows the factor approaches the classical 3 sigma (normal quantile of
    # 1 - 0.00135 = 3.0000; fact of the normal distribution).
    assert limit_factor(100_000) == pytest.approx(3.0, abs=2e-3)
    assert limit_factor(10) == pytest.approx(4.09, abs=0.01)  # scipy: t(0.99865; 9) = 4.094


def test_the_precision_limit_follows_the_handbooks_f_formula() -> None:
    # UCL = s1 sqrt(F(alpha; J - 1, K(J - 1))) (e-Handbook §2.2.3.1).  J = 3 repeats, K = 12
    # occasions: F(0.05; 2, 24) = 3.40 in the published F table (5 % level; e.g. the
    # e-Handbook §1.3.6.7.3 table, as reproduced, to two decimals).
    assert precision_limit(1.0, 3, 24, 0.05) == pytest.approx(math.sqrt(3.40), rel=2e-3)
    # F(0.01; 2, 10) = 7.56 in the 1 % table.
    assert precision_limit(2.0, 3, 10, 0.01) == pytest.approx(2 * math.sqrt(7.56), rel=2e-3)
    assert precision_limit(0.5, 4, 30, 0.01) == pytest.approx(0.5 * math.sqrt(stats.f.ppf(0.99, 3, 30)), rel=1e-12)
    # §2.3.5.1.1's balance: 3 degrees of freedom per run (J - 1 = 3), s1 pooled over 117 runs
    # (351 degrees of freedom), the 1 % level -- its Dataplot commands: sqrt(fppf(.99, 3, 351))
    # times s1.  The published 1 % F table's last rows bound it: F(0.01; 3, 120) = 3.95 and
    # F(0.01; 3, infinity) = 3.78 (from memory).
    factor = precision_limit(1.0, 4, 351, 0.01) ** 2
    assert 3.78 < factor < 3.95


def test_a_baseline_is_the_mean_and_sample_standard_deviation_of_its_values() -> None:
    rng = np.random.default_rng(7)
    values = 0.3333 + 2e-4 * rng.standard_normal(10)
    spreads = 1e-4 * (1 + rng.random(10))
    base = make_baseline([ChartPoint(float(v), float(s), 3) for v, s in zip(values, spreads, strict=True)])
    # numpy as the reference: the mean and the sample standard deviation (ddof = 1).
    assert base.center == pytest.approx(np.mean(values), rel=1e-15)
    assert base.process_std == pytest.approx(np.std(values, ddof=1), rel=1e-12)
    assert base.pooled_std == pytest.approx(math.sqrt(np.mean(spreads**2)), rel=1e-12)
    assert base.pooled_dof == 20
    assert base.upper - base.center == pytest.approx(stats.t.ppf(1 - 0.00135, 9) * np.std(values, ddof=1))


CHART = Baseline(count=10, center=0.0, process_std=1.0, limit_factor=4.09)


@pytest.mark.parametrize(("series", "rule"), [
    ([0.2, -0.5, 4.5], BEYOND_LIMITS),
    ([2.5, 0.5, 2.2], TWO_OF_THREE),
    ([-2.5, 0.5, -2.2], TWO_OF_THREE),
    ([1.5, 1.2, -0.2, 1.1, 1.3], FOUR_OF_FIVE),
    ([0.3, 0.1, 0.6, 0.2, 0.4, 0.1, 0.5, 0.2], EIGHT_ON_ONE_SIDE),
    ([-0.9, -0.6, -0.2, 0.1, 0.4, 0.8], SIX_TRENDING),
    ([0.8, 0.4, 0.1, -0.2, -0.6, -0.9], SIX_TRENDING),
])
def test_each_run_rule_fires_on_its_pattern(series: list[float], rule: str) -> None:
    # Patterns by construction from the rules' own statements (Western Electric Statistical
    # Quality Control Handbook, 1956; Nelson 1984, test 3), in units of the baseline's s.
    assert rule in run_rule_signals(series, CHART)
    assert run_rule_signals(series[:-1], CHART) == ()  # the last point completes the pattern


@pytest.mark.parametrize("series", [
    [0.5, -0.4, 0.9, -1.2, 0.3, 0.0, -0.7, 1.1],
    [2.5, 0.5, -2.2],          # beyond 2 s on opposite sides
    [1.5, 1.2, -0.2, -1.1, 1.3],
    [0.3, 0.1, 0.6, 0.2, 0.4, 0.1, -0.5, 0.2],
    [-0.9, -0.6, -0.2, 0.1, 0.4, 0.3],
])
def test_no_rule_fires_on_ordinary_scatter(series: list[float]) -> None:
    assert run_rule_signals(series, CHART) == ()


def test_a_slow_drift_is_caught_by_the_run_rules_long_before_a_point_crosses_the_limits() -> None:
    # A check standard drifting by 0.3 s per check: noise-free, so the answer is known.  The
    # limits (4.09 s for K = 10) are crossed at the 14th point; the trend rule fires at the
    # 6th, the 4-of-5 rule at the 5th (points 4.. beyond 1 s).
    rng = np.random.default_rng(11)
    baseline = [ChartPoint(float(v)) for v in rng.standard_normal(10)]
    base = make_baseline(baseline)
    drift = [ChartPoint(base.center + 0.3 * base.process_std * (i + 1)) for i in range(20)]
    _, judged = judge_series(baseline + drift, 10)
    first_signal = next(i for i, j in enumerate(judged[10:]) if j.signals)
    first_beyond = next(i for i, p in enumerate(drift) if p.value > base.upper)
    assert first_signal <= 5 < first_beyond
    assert SIX_TRENDING in judged[10 + 5].signals or FOUR_OF_FIVE in judged[10 + first_signal].signals


def test_the_baseline_leaves_out_checks_that_disagreed_and_rules_restart_after_a_signal() -> None:
    points = [ChartPoint(v) for v in (0.1, -0.1, 0.05, 9.0, -0.05, 0.0)] + [ChartPoint(5.0), ChartPoint(0.02)]
    usable = [True, True, True, False, True, True, True, True]
    base, judged = judge_series(points, 5, usable=usable)
    assert base is not None and base.count == 5 and base.center == pytest.approx(0.0)
    assert [j.signals for j in judged[:6]] == [None] * 6      # the baseline, and the bad check within it
    assert BEYOND_LIMITS in judged[6].signals                # far beyond
    assert judged[7].signals == ()                           # counted afresh after the signal
    none, building = judge_series(points[:4], 5)
    assert none is None and all(j.signals is None for j in building)


def test_a_widened_short_term_spread_is_flagged_by_the_precision_chart() -> None:
    baseline = [ChartPoint(0.0 + 0.01 * i, 1.0, 3) for i in range(-5, 5)]
    base = make_baseline(baseline)
    limit = base.precision_limit(3)
    assert limit == pytest.approx(math.sqrt(stats.f.ppf(0.99, 2, 20)))
    _, judged = judge_series([*baseline, ChartPoint(0.0, 0.9 * limit, 3), ChartPoint(0.0, 1.1 * limit, 3)], 10)
    assert judged[10].signals == () and judged[11].signals == (SPREAD_TOO_WIDE,)


# -- one point per calibration ----------------------------------------------------------------

def _calibrations(values_by_calibration: list[list[float]], first: int = 0, spread: float | None = None,
                  repeats: int = 1) -> list[ChartPoint]:
    """Checks grouped by calibration (cal-<first>, cal-<first + 1>, ...), oldest first."""
    return [ChartPoint(v, spread, repeats, f"cal-{first + n}")
            for n, values in enumerate(values_by_calibration) for v in values]


def test_the_baseline_takes_the_first_agreeing_check_of_each_calibration() -> None:
    points = _calibrations([[0.1, 0.11, 0.12], [0.2], [0.3, 0.31], [0.4]])
    assert baseline_indices(points, 3) == [0, 3, 4]
    # A calibration whose first check disagreed with its reference is represented by its next.
    assert baseline_indices(points, 3, [True, True, True, True, False, True, True]) == [0, 3, 5]
    assert occasions(points) == 4 and occasions(points[:3]) == 1
    # Points without a calibration are each an occasion of their own (as before).
    assert baseline_indices([ChartPoint(v) for v in (1.0, 2.0, 3.0)], 2) == [0, 1]
    base, judged = judge_series(points, 3)
    assert base is not None and base.count == 3 and base.center == pytest.approx(0.2)
    assert [j.judged for j in judged] == [False] * 5 + [True] * 2


def test_checks_sharing_one_calibration_do_not_make_a_run() -> None:
    # Ten calibrations set the baseline (s2 = 1, centre 0); the next calibration reads 1.5 s2
    # high -- inside the limits -- and is checked after each of twenty devices.  Its checks
    # share its error: one occasion, not twenty.  Judged as independent points they would break
    # the 4-of-5 and 8-in-a-row rules; one point per calibration breaks none.
    baseline = _calibrations([[v] for v in (-1.5, -1.0, -0.5, 0.0, 0.0, 0.0, 0.5, 1.0, 1.5, 0.0)])
    offset = _calibrations([[1.5 + 0.01 * (i % 3) for i in range(20)]], first=10)
    base, judged = judge_series(baseline + offset, 10)
    assert base is not None and base.center == pytest.approx(0.0) and base.upper > 1.6
    assert all(j.signals == () for j in judged[10:])
    # The same values, each its own calibration: the rules fire (the audit's false alarms).
    _, independent = judge_series(baseline + [ChartPoint(p.value) for p in offset], 10)
    assert any(FOUR_OF_FIVE in (j.signals or ()) for j in independent[10:])


def test_a_calibration_is_represented_by_its_latest_check() -> None:
    # After the baseline, calibrations 10 and 11 read +2.5 s2 (two of three beyond 2 s2 needs a
    # third).  Calibration 12's first check reads 0: no signal; its second reads +2.2: with
    # calibrations 10 and 11 it completes 2 of 3 beyond 2 s2 -- its first check no longer counts.
    baseline = _calibrations([[v] for v in (-1.5, -1.0, -0.5, 0.0, 0.0, 0.0, 0.5, 1.0, 1.5, 0.0)])
    later = _calibrations([[2.5], [0.5], [0.0, 2.2]], first=10)
    _, judged = judge_series(baseline + later, 10)
    assert [j.signals for j in judged[10:]] == [(), (), (), (TWO_OF_THREE,)]


def test_run_rules_catch_a_slow_drift_across_calibrations_before_any_check_leaves_the_limits() -> None:
    # The README's claim.  A check standard read by successive calibrations that drift by 0.3 s2
    # each (noise-free, so the answer is known by construction), with five checks per calibration
    # scattering by 0.05 s2 around it.  The limits (4.09 s2 for K = 10) are first crossed by the
    # 14th calibration after the baseline (cal-23, 4.2 s2); the trend rule fires at the first
    # check of the 6th (cal-15: six calibrations in a row rising), the 4-of-5 rule would at the
    # 7th.  Every check before that stays inside the limits and in control.
    rng = np.random.default_rng(11)
    baseline = _calibrations([[float(v)] for v in rng.standard_normal(10)])
    base = make_baseline(baseline)
    scatter = [0.0, 0.05, -0.05, 0.02, -0.02]
    drift = _calibrations([[base.center + base.process_std * (0.3 * (c + 1) + d) for d in scatter]
                           for c in range(16)], first=10)
    _, judged = judge_series(baseline + drift, 10)
    later = judged[10:]
    first_signal = next(i for i, j in enumerate(later) if j.signals)
    first_beyond = next(i for i, p in enumerate(drift) if not base.lower <= p.value <= base.upper)
    assert drift[first_signal].calibration == "cal-15" and drift[first_beyond].calibration == "cal-23"
    assert first_signal == 5 * 5 and first_signal < first_beyond
    assert later[first_signal].signals == (SIX_TRENDING,) and not later[first_signal].fails
    assert all(j.signals == () for j in later[:first_signal])


def test_only_a_point_beyond_the_limits_fails_a_check() -> None:
    baseline = _calibrations([[v] for v in (-1.5, -1.0, -0.5, 0.0, 0.0, 0.0, 0.5, 1.0, 1.5, 0.0)], spread=1.0,
                             repeats=3)
    later = _calibrations([[9.0], [2.5], [0.5], [2.2], [0.0]], first=10, spread=1.0, repeats=3)
    later[-1] = ChartPoint(0.0, 10.0, 3, "cal-14")
    _, judged = judge_series(baseline + later, 10)
    signals = [j.signals for j in judged[10:]]
    assert signals == [(BEYOND_LIMITS,), (), (), (TWO_OF_THREE,), (SPREAD_TOO_WIDE,)]
    assert [j.fails for j in judged[10:]] == [True, False, False, False, False]
