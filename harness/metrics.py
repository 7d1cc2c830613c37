"""RF figures of merit from reflection and transmission, and per-band summaries.

Conversions (any RF handbook; e.g. the ARRL Handbook's SWR / return-loss tables):
  VSWR = (1 + |Γ|) / (1 - |Γ|)          |Γ| = (VSWR - 1) / (VSWR + 1)
  return loss (dB) = -20 log10 |Γ|       mismatch loss (dB) = -10 log10 (1 - |Γ|²)
  insertion loss (dB) = -20 log10 |S21|  group delay = -dφ/dω (φ the unwrapped phase of S21)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lineproof.values import BandLimit


def vswr_from_reflection(magnitude: np.ndarray | float) -> np.ndarray:
    g = np.asarray(magnitude, dtype=float)
    with np.errstate(divide="ignore"):
        return np.where(g >= 1.0, np.inf, (1.0 + g) / (1.0 - g))


def reflection_from_vswr(vswr: np.ndarray | float) -> np.ndarray:
    v = np.asarray(vswr, dtype=float)
    if np.any(v < 1.0):
        raise ValueError("VSWR cannot be below 1")
    return np.where(np.isinf(v), 1.0, (v - 1.0) / (v + 1.0))


def return_loss_db(magnitude: np.ndarray | float) -> np.ndarray:
    g = np.asarray(magnitude, dtype=float)
    with np.errstate(divide="ignore"):
        return -20.0 * np.log10(g)


def reflection_from_return_loss_db(return_loss: np.ndarray | float) -> np.ndarray:
    return 10.0 ** (-np.asarray(return_loss, dtype=float) / 20.0)


def mismatch_loss_db(magnitude: np.ndarray | float) -> np.ndarray:
    g = np.asarray(magnitude, dtype=float)
    with np.errstate(divide="ignore"):
        return -10.0 * np.log10(1.0 - g * g)


@dataclass(frozen=True)
class BandFigures:
    """Worst and mean reflection of one band, and where the worst point is."""

    worst_reflection: float
    worst_frequency_hz: float
    mean_reflection: float
    indices: np.ndarray


def band_mask(frequencies_hz: np.ndarray, band: BandLimit) -> np.ndarray:
    return (frequencies_hz >= band.start_hz) & (frequencies_hz <= band.stop_hz)


def band_indices(frequencies_hz: np.ndarray, band: BandLimit) -> np.ndarray:
    """Indices of the sweep points inside the band, edges included, on an ascending grid (as
    every sweep's is): the points :func:`band_mask` selects, found by bisection."""
    low = int(np.searchsorted(frequencies_hz, band.start_hz, "left"))
    return np.arange(low, max(low, int(np.searchsorted(frequencies_hz, band.stop_hz, "right"))))


def band_figures(frequencies_hz: np.ndarray, magnitude: np.ndarray, band: BandLimit) -> BandFigures:
    """Figures over the sweep points inside the band (inclusive of its edges)."""
    indices = band_indices(frequencies_hz, band)
    if indices.size == 0:
        raise ValueError(
            f"band {band.name} ({band.start_hz / 1e6:g}-{band.stop_hz / 1e6:g} MHz) holds no sweep point"
        )
    in_band = magnitude[indices]
    worst = int(np.argmax(in_band))
    return BandFigures(float(in_band[worst]), float(frequencies_hz[indices[worst]]), float(np.mean(in_band)), indices)


def insertion_loss_db(transmission: np.ndarray | float) -> np.ndarray:
    """-20 log10 |S21| (positive for a lossy device)."""
    t = np.abs(np.asarray(transmission))
    with np.errstate(divide="ignore"):
        return -20.0 * np.log10(t)


def phase_deg(trace: np.ndarray, unwrap: bool = False) -> np.ndarray:
    """Phase of a complex trace in degrees (unwrapped along the sweep when asked)."""
    angle = np.angle(np.asarray(trace, dtype=complex))
    return np.degrees(np.unwrap(angle) if unwrap else angle)


def group_delay_s(frequencies_hz: np.ndarray, trace: np.ndarray) -> np.ndarray:
    """Group delay -dφ/dω from the unwrapped phase (central differences inside the sweep,
    one-sided at its ends).  The phase must not turn by more than π between points."""
    f = np.asarray(frequencies_hz, dtype=float)
    if f.size < 2:
        raise ValueError("group delay needs at least two sweep points")
    return -np.gradient(np.unwrap(np.angle(np.asarray(trace, dtype=complex))), 2 * np.pi * f)


def marker_index(frequencies_hz: np.ndarray, marker_hz: float) -> int:
    """Index of the sweep point nearest a marker frequency; a marker outside the sweep is
    refused (a reading there would be invented)."""
    f = np.asarray(frequencies_hz, dtype=float)
    spacing = float(np.max(np.diff(f))) if f.size > 1 else 0.0
    if marker_hz < f[0] - spacing / 2 or marker_hz > f[-1] + spacing / 2:
        raise ValueError(f"marker at {marker_hz / 1e6:g} MHz lies outside the sweep "
                         f"({f[0] / 1e6:g}-{f[-1] / 1e6:g} MHz)")
    return int(np.argmin(np.abs(f - marker_hz)))


def worst_in_band(frequencies_hz: np.ndarray, values: np.ndarray, band: BandLimit) -> tuple[float, float]:
    """Largest value inside the band and the frequency where it occurs."""
    indices = band_indices(frequencies_hz, band)
    if indices.size == 0:
        raise ValueError(
            f"band {band.name} ({band.start_hz / 1e6:g}-{band.stop_hz / 1e6:g} MHz) holds no sweep point"
        )
    worst = int(np.argmax(values[indices]))
    return float(values[indices[worst]]), float(frequencies_hz[indices[worst]])
