"""The repeatability study's ANOVA against a published worked example and against statsmodels."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from statsmodels.formula.api import ols
from statsmodels.stats.anova import anova_lm

from lineproof.gauge_study import anova, variance_components

# USP <1010> "Analytical Data -- Interpretation and Treatment" (USP 29-NF 24), its worked
# one-way ANOVA: five runs of three replicates each.
USP_RUNS = np.array([
    [100.70, 101.05, 101.15],
    [99.46, 99.37, 99.59],
    [99.96, 100.17, 101.01],
    [101.80, 102.16, 102.44],
    [101.91, 102.00, 101.67],
])


def test_one_way_anova_matches_the_published_example() -> None:
    table = anova(USP_RUNS[:, None, :])
    # Published: between runs df 4, SS 14.200, MS 3.550; within runs df 10, SS 1.018, MS 0.102; F 34.80.
    assert (table.df_devices, table.df_error) == (4, 10)
    assert table.ss_devices == pytest.approx(14.200, abs=5e-4)
    assert table.ss_error == pytest.approx(1.018, abs=5e-4)
    assert table.ms_devices == pytest.approx(3.550, abs=5e-4)
    assert table.ms_error == pytest.approx(0.102, abs=5e-4)
    # The published F is the ratio of the mean squares as printed (3.550 / 0.102).
    assert round(table.ms_devices, 3) / round(table.ms_error, 3) == pytest.approx(34.80, abs=5e-3)
    result = variance_components(table, tolerance=10.0)
    # Published "precision of the mean" for the test plans: the variance of one run of one
    # replicate is 1.251, of two runs of three replicates 0.592 -- between-run plus within-run
    # variance components divided by the plan's counts.
    between, within = result.device_sd**2, result.repeatability**2
    assert between + within == pytest.approx(1.251, abs=5e-4)
    assert between / 2 + within / 6 == pytest.approx(0.592, abs=5e-4)
    assert result.reproducibility == 0.0 and result.share(result.repeatability) == pytest.approx(
        6 * math.sqrt(within) / 10.0)


def _frame(y: np.ndarray) -> pd.DataFrame:
    n, k, r = y.shape
    index = np.indices(y.shape).reshape(3, -1)
    return pd.DataFrame({"y": y.reshape(-1), "device": index[0], "operator": index[1]})


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_crossed_anova_agrees_with_statsmodels(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n, k, r = 6, 3, 4
    y = (1.05 + 0.02 * rng.standard_normal(n)[:, None, None] + 0.003 * rng.standard_normal(k)[None, :, None]
         + 0.002 * rng.standard_normal((n, k))[:, :, None] + 0.001 * rng.standard_normal((n, k, r)))
    table = anova(y)
    # statsmodels' ordinary least squares ANOVA of the same data (balanced: every type agrees).
    reference = anova_lm(ols("y ~ C(device) * C(operator)", data=_frame(y)).fit(), typ=2)
    expected = {"C(device)": (table.ss_devices, table.df_devices),
                "C(operator)": (table.ss_operators, table.df_operators),
                "C(device):C(operator)": (table.ss_interaction, table.df_interaction),
                "Residual": (table.ss_error, table.df_error)}
    for term, (ss, df) in expected.items():
        assert reference.loc[term, "sum_sq"] == pytest.approx(ss, rel=1e-9)
        assert reference.loc[term, "df"] == df
    assert reference.loc["C(device)", "F"] == pytest.approx(table.ms_devices / table.ms_error, rel=1e-9)
    # The variance components from statsmodels' mean squares by the crossed random-effects
    # model's expected mean squares (Montgomery, from memory): devices against the interaction.
    ms = reference["sum_sq"] / reference["df"]
    result = variance_components(table, tolerance=0.2)
    devices = (ms["C(device)"] - ms["C(device):C(operator)"]) / (k * r)
    assert result.device_sd == pytest.approx(math.sqrt(max(devices, 0.0)), rel=1e-9)
    interaction = (ms["C(device):C(operator)"] - ms["Residual"]) / r
    assert result.interaction_sd == pytest.approx(math.sqrt(max(interaction, 0.0)), rel=1e-9, abs=1e-15)


def test_variance_components_recover_known_spreads() -> None:
    # Data drawn with known standard deviations: devices 0.02, operators 0.004, interaction
    # 0.002, repeatability 0.001.  The estimates must come back within their sampling error
    # (a few tens of percent for the operators with 8 of them; a few percent for the rest).
    rng = np.random.default_rng(2024)
    n, k, r = 40, 8, 10
    y = (1.1 + 0.02 * rng.standard_normal(n)[:, None, None] + 0.004 * rng.standard_normal(k)[None, :, None]
         + 0.002 * rng.standard_normal((n, k))[:, :, None] + 0.001 * rng.standard_normal((n, k, r)))
    result = variance_components(anova(y), tolerance=0.2)
    assert result.repeatability == pytest.approx(0.001, rel=0.05)
    assert result.interaction_sd == pytest.approx(0.002, rel=0.1)
    assert result.operator_sd == pytest.approx(0.004, rel=0.5)
    assert result.device_sd == pytest.approx(0.02, rel=0.25)
    assert result.gauge == pytest.approx(math.sqrt(result.repeatability**2 + result.reproducibility**2))
    assert result.reproducibility**2 == pytest.approx(result.operator_sd**2 + result.interaction_sd**2)


def test_a_negative_component_is_taken_as_zero_and_bad_shapes_are_refused() -> None:
    y = np.zeros((3, 2, 2))
    y[:, :, 1] = 1e-3  # all the spread within cells: no device, operator or interaction effect
    result = variance_components(anova(y), tolerance=0.1)
    assert result.device_sd == result.operator_sd == result.interaction_sd == 0.0
    assert result.repeatability == pytest.approx(math.sqrt(np.var([0, 1e-3], ddof=1)))
    with pytest.raises(ValueError):
        anova(np.zeros((1, 2, 3)))
    with pytest.raises(ValueError):
        anova(np.zeros((3, 2, 1)))
