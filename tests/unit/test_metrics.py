"""Reflection figures against published conversion values and against scikit-rf."""

from __future__ import annotations

import numpy as np
import pytest
import skrf

from lineproof import metrics
from lineproof.steps import DEFAULT_TERMINATION_LIMIT_VSWR
from lineproof.values import BandLimit

# VSWR -> (|Γ|, return loss dB, mismatch loss dB) as printed in the usual VSWR conversion
# tables, e.g. "Reference Data for Engineers", 9th ed., chapter on transmission lines
# (values from memory, rounded as such tables round them).
PUBLISHED = [
    (1.10, 0.0476, 26.44, 0.0099),
    (1.20, 0.0909, 20.83, 0.0360),
    (1.50, 0.2000, 13.98, 0.1773),
    (2.00, 0.3333, 9.54, 0.5115),
    (3.00, 0.5000, 6.02, 1.2494),
]


@pytest.mark.parametrize(("vswr", "gamma", "return_loss", "mismatch_loss"), PUBLISHED)
def test_conversions_match_published_table(vswr: float, gamma: float, return_loss: float, mismatch_loss: float) -> None:
    assert metrics.reflection_from_vswr(vswr) == pytest.approx(gamma, abs=5e-5)
    assert metrics.vswr_from_reflection(gamma) == pytest.approx(vswr, abs=5e-4)
    assert metrics.return_loss_db(metrics.reflection_from_vswr(vswr)) == pytest.approx(return_loss, abs=5e-3)
    assert metrics.mismatch_loss_db(metrics.reflection_from_vswr(vswr)) == pytest.approx(mismatch_loss, abs=5e-4)
    # the table's return loss is rounded to 0.01 dB, which moves |Γ| by up to 0.06 %
    assert metrics.reflection_from_return_loss_db(return_loss) == pytest.approx(gamma, rel=1e-3)


def test_common_practice_figures() -> None:
    # Common practice, no published source: a 1.3:1 insertion VSWR is about 17.7 dB return loss.
    assert metrics.return_loss_db(metrics.reflection_from_vswr(1.3)) == pytest.approx(17.7, abs=0.05)
    # Common practice, no published source: a termination must be 1.05:1 or better.
    assert DEFAULT_TERMINATION_LIMIT_VSWR == 1.05
    assert metrics.return_loss_db(metrics.reflection_from_vswr(1.05)) == pytest.approx(32.26, abs=0.01)


def test_agrees_with_scikit_rf_on_random_reflections() -> None:
    rng = np.random.default_rng(5)
    gamma = rng.uniform(0, 0.95, 200) * np.exp(1j * rng.uniform(0, 2 * np.pi, 200))
    network = skrf.Network(frequency=skrf.Frequency(1, 200, 200, "MHz"), s=gamma)
    np.testing.assert_allclose(metrics.vswr_from_reflection(np.abs(gamma)), network.s_vswr[:, 0, 0], rtol=1e-12)
    np.testing.assert_allclose(metrics.return_loss_db(np.abs(gamma)), -network.s_db[:, 0, 0], rtol=1e-12)


def test_edge_values() -> None:
    assert metrics.vswr_from_reflection(0.0) == 1.0
    assert np.isinf(metrics.vswr_from_reflection(1.0))
    assert np.isinf(metrics.return_loss_db(0.0))
    with pytest.raises(ValueError):
        metrics.reflection_from_vswr(0.9)


def test_band_figures_use_only_points_inside_the_band() -> None:
    f = np.linspace(100e6, 500e6, 401)
    magnitude = np.where((f >= 144e6) & (f <= 148e6), 0.05, 0.5)
    magnitude[46] = 0.07  # 146 MHz
    figures = metrics.band_figures(f, magnitude, BandLimit("2m", 144e6, 148e6, 1.2))
    assert figures.worst_reflection == 0.07
    assert figures.worst_frequency_hz == 146e6
    assert figures.indices.size == 5
    with pytest.raises(ValueError, match="holds no sweep point"):
        metrics.band_figures(f, magnitude, BandLimit("23cm", 1240e6, 1300e6, 1.2))
