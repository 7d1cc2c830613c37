"""RF figures of merit from reflection, and per-band summaries.

Conversions (any RF handbook; e.g. the ARRL Handbook's SWR / return-loss tables):
  VSWR = (1 + |Γ|) / (1 - |Γ|)          |Γ| = (VSWR - 1) / (VSWR + 1)
  return loss (dB) = -20 log10 |Γ|       mismatch loss (dB) = -10 log10 (1 - |Γ|²)
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


def band_figures(frequencies_hz: np.ndarray, magnitude: np.ndarray, band: BandLimit) -> BandFigures:
    """Figures over the sweep points inside the band (inclusive of its edges)."""
    indices = np.flatnonzero(band_mask(frequencies_hz, band))
    if indices.size == 0:
        raise ValueError(
            f"band {band.name} ({band.start_hz / 1e6:g}-{band.stop_hz / 1e6:g} MHz) holds no sweep point"
        )
    in_band = magnitude[indices]
    worst = int(np.argmax(in_band))
    return BandFigures(float(in_band[worst]), float(frequencies_hz[indices[worst]]), float(np.mean(in_band)), indices)
