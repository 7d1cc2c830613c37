"""Marker readings and group delay on traces whose answers are known in closed form."""

from __future__ import annotations

import math

import numpy as np
import pytest

from lineproof.markers import MatchTrace, TransmissionTrace, band_group_delay, group_delay, read_markers
from lineproof.values import BandLimit

F = np.linspace(100e6, 200e6, 101)  # 1 MHz apart


def line(delay_s: float, loss_db: float = 0.5) -> np.ndarray:
    """A matched line: S21 = 10^(-IL/20) e^(-j 2π f τ), whose group delay is τ (-dφ/dω of a
    phase -ωτ, the definition)."""
    return 10 ** (-loss_db / 20) * np.exp(-2j * np.pi * F * delay_s)


def test_the_group_delay_of_a_line_is_its_delay_and_its_bound_follows_the_phase() -> None:
    phase_u = np.full(F.size, math.radians(0.5))
    tau, u = group_delay(F, TransmissionTrace(line(3e-9), None, phase_u))
    np.testing.assert_allclose(tau, 3e-9, rtol=1e-9)
    # U(τ) = (U(φ[i-1]) + U(φ[i+1])) / (2π (f[i+1] - f[i-1])): 2 x 0.5° over 2 MHz, 1 MHz at the ends
    assert u is not None
    np.testing.assert_allclose(u[1:-1], 2 * math.radians(0.5) / (2 * np.pi * 2e6), rtol=1e-12)
    np.testing.assert_allclose(u[[0, -1]], 2 * math.radians(0.5) / (2 * np.pi * 1e6), rtol=1e-12)


def test_a_delay_the_sweep_does_not_resolve_is_not_given() -> None:
    # 300 ns turns the phase 108° per 1 MHz step: beyond 90°, an unwrapped phase could be a
    # turn off, so no group delay is given there (NaN), nor its band's extremes
    tau, _ = group_delay(F, TransmissionTrace(line(300e-9), None, None))
    assert np.isnan(tau).all()
    assert all(math.isnan(x) for x in band_group_delay(F, tau, BandLimit("b", 120e6, 150e6, 1.5)))
    tau, _ = group_delay(F, TransmissionTrace(line(200e-9), None, None))  # 72° per step: resolved
    np.testing.assert_allclose(tau, 200e-9, rtol=1e-9)
    assert band_group_delay(F, tau, BandLimit("b", 120e6, 150e6, 1.5)) == pytest.approx((200e-9, 200e-9))


def test_a_marker_reads_the_nearest_point_of_every_trace() -> None:
    gamma = np.linspace(0.01, 0.2, F.size)  # |Γ| rising: VSWR and return loss known at each point
    s21 = line(2e-9, loss_db=1.25)
    match = MatchTrace("input-match", gamma, np.full(F.size, 0.004))
    transmission = TransmissionTrace(s21, np.full(F.size, 0.03), np.full(F.size, math.radians(0.2)))
    (reading,) = read_markers(F, {"f0": 150.4e6}, match, transmission)
    i = 50  # 150 MHz is the nearest point
    assert reading.frequency_hz == 150e6 and reading.figure == "input-match"
    assert reading.requested_hz == 150.4e6  # what the sequence named, kept beside where it was read
    assert reading.reflection == pytest.approx(gamma[i]) and reading.expanded_uncertainty == 0.004
    assert reading.vswr == pytest.approx((1 + gamma[i]) / (1 - gamma[i]))
    assert reading.return_loss_db == pytest.approx(-20 * math.log10(gamma[i]))
    assert reading.insertion_loss_db == pytest.approx(1.25) and reading.insertion_loss_uncertainty_db == 0.03
    expected_phase = math.degrees(math.remainder(-2 * math.pi * 150e6 * 2e-9, 2 * math.pi))
    assert reading.phase_deg == pytest.approx(expected_phase) and reading.phase_uncertainty_deg == pytest.approx(0.2)
    assert reading.group_delay_s == pytest.approx(2e-9)
    assert reading.group_delay_uncertainty_s == pytest.approx(2 * math.radians(0.2) / (2 * np.pi * 2e6))
    (bare,) = read_markers(F, {"f0": 150e6}, None, transmission)  # a thru response: no reflection
    assert bare.requested_hz is None  # named on a sweep point: read there
    assert bare.reflection is None and bare.vswr is None and bare.return_loss_db is None and bare.figure is None
    with pytest.raises(ValueError, match="outside the sweep"):
        read_markers(F, {"far": 300e6}, match, None)


def test_the_group_delay_is_the_metrics_central_difference() -> None:
    # metrics.group_delay_s (numpy's gradient of the unwrapped phase) on a filter-like S21 of
    # uneven delay: the same numbers wherever the sweep resolves the phase
    rng = np.random.default_rng(4)
    s21 = np.exp(-2j * np.pi * np.cumsum(rng.uniform(0, 5e-9, F.size)) * 1e6) * rng.uniform(0.1, 1, F.size)
    tau, _ = group_delay(F, TransmissionTrace(s21, None, None))
    from lineproof.metrics import group_delay_s

    np.testing.assert_allclose(tau, group_delay_s(F, s21), rtol=1e-9)
