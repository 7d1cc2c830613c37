"""Interpolation of complex data with its own error estimate, against the simulator's own
(independent) error-term model as the truth."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import CubicSpline

from lineproof.resample import resample
from lineproof.simulators.error_model import PortErrorModel, PortErrorSettings

FINE = np.linspace(1e6, 3e9, 10001)


def terms(points: int, cable_delay_s: float, seed: int = 7) -> tuple[np.ndarray, np.ndarray]:
    model = PortErrorModel(PortErrorSettings(cable_delay_s=cable_delay_s), seed)
    coarse = model.terms(np.linspace(1e6, 3e9, points)).as_dict()
    fine = model.terms(FINE).as_dict()
    return np.stack(list(coarse.values())), np.stack(list(fine.values()))


@pytest.mark.parametrize("points", [201, 401, 801, 1601])
@pytest.mark.parametrize("cable_delay_s", [1e-9, 2.4e-9, 5e-9])
def test_estimate_covers_the_actual_error(points: int, cable_delay_s: float) -> None:
    coarse, truth = terms(points, cable_delay_s)
    moved = resample(np.linspace(1e6, 3e9, points), coarse, FINE)
    actual = np.max(np.abs(moved.values - truth), axis=1)
    assert np.all(moved.estimated_error >= actual)
    # and it is an estimate, not a blanket: within a factor of 50 of the truth
    assert np.all(moved.estimated_error <= 50 * actual + 1e-12)


def test_turning_back_the_delay_beats_a_plain_cubic() -> None:
    # The trap measured in scikit-rf's absence of calibration interpolation: a plain cubic
    # through terms that turn with a cable's delay is poor; turning back first is not.
    coarse, truth = terms(201, 5e-9)
    grid = np.linspace(1e6, 3e9, 201)
    plain = np.max(np.abs(CubicSpline(grid, coarse, axis=1)(FINE) - truth))
    ours = np.max(np.abs(resample(grid, coarse, FINE).values - truth))
    assert plain > 1e-2 and ours < plain / 50


def test_refuses_to_extrapolate_or_work_from_too_few_points() -> None:
    grid = np.linspace(1e8, 1e9, 101)
    values = np.exp(1j * grid / 1e8)
    with pytest.raises(ValueError, match="leaves the known span"):
        resample(grid, values, np.linspace(0.9e8, 1e9, 11))
    with pytest.raises(ValueError, match="too few"):
        resample(grid[:12], values[:12], grid[:12])


def test_exact_on_the_known_points() -> None:
    grid = np.linspace(1e8, 1e9, 101)
    values = np.exp(1j * grid / 1e8) * (1 + 0.1 * np.sin(grid / 1e8))
    np.testing.assert_allclose(resample(grid, values, grid).values, values, atol=1e-12)
