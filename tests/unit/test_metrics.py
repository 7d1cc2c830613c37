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


def test_insertion_loss_and_phase_agree_with_scikit_rf() -> None:
    rng = np.random.default_rng(6)
    s = rng.uniform(0.1, 1, (200, 2, 2)) * np.exp(1j * rng.uniform(0, 2 * np.pi, (200, 2, 2)))
    network = skrf.Network(frequency=skrf.Frequency(1, 200, 200, "MHz"), s=s)
    np.testing.assert_allclose(metrics.insertion_loss_db(s[:, 1, 0]), -network.s_db[:, 1, 0], rtol=1e-12)
    np.testing.assert_allclose(metrics.phase_deg(s[:, 1, 0]), network.s_deg[:, 1, 0], atol=1e-12)


def test_group_delay_of_a_line_and_of_a_filter() -> None:
    f = np.linspace(10e6, 1e9, 991)
    # a pure delay: the group delay is the delay itself
    np.testing.assert_allclose(metrics.group_delay_s(f, np.exp(-2j * np.pi * f * 3.3e-9)), 3.3e-9, rtol=1e-12)
    # a filter: against scikit-rf's Network.group_delay (a reference library)
    media = skrf.media.DefinedGammaZ0(skrf.Frequency.from_f(f, unit="Hz"), z0_port=50.0, z0=50.0)
    filt = media.shunt_capacitor(10e-12) ** media.inductor(60e-9) ** media.shunt_capacitor(10e-12)
    np.testing.assert_allclose(metrics.group_delay_s(f, filt.s[:, 1, 0]), filt.group_delay[:, 1, 0], rtol=1e-9)


def test_markers_read_the_nearest_point_and_refuse_outside() -> None:
    f = np.linspace(100e6, 500e6, 401)
    assert metrics.marker_index(f, 145.2e6) == 45
    with pytest.raises(ValueError, match="outside the sweep"):
        metrics.marker_index(f, 600e6)


def test_return_loss_limit_tightens_the_vswr_limit() -> None:
    # 20 dB return loss is |Γ| 0.1, tighter than VSWR 1.5 (|Γ| 0.2); "Reference Data for
    # Engineers" conversion table values as above.
    band = BandLimit("b", 1e6, 2e6, 1.5, min_return_loss_db=20.0)
    assert band.max_reflection == pytest.approx(0.1)
    assert BandLimit("b", 1e6, 2e6, 1.5).max_reflection == pytest.approx(0.2)
    assert BandLimit("b", 1e6, 2e6, float("inf")).max_reflection == 1.0
