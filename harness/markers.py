"""Readings at named markers, and the group delay of transmission data per band.

A sequence names markers (``[[marker]] name, frequency_hz``); each is read at the sweep point
nearest its frequency (:func:`lineproof.metrics.marker_index`): the headline match figure's
|Γ| -- as VSWR and return loss -- with its expanded uncertainty, and with transmission data
insertion loss, the phase of S21 and its group delay, each with its own.

Group delay is -dφ/dω from the unwrapped phase, central differences over the neighbouring
points (:func:`lineproof.metrics.group_delay_s`, one-sided at the ends of the sweep).  Its
uncertainty is taken from the phase's at those points, as if their errors were independent
and opposed: U(τ) = (U(φ[i-1]) + U(φ[i+1])) / (2π (f[i+1] - f[i-1])) -- a bound; systematic
errors, which change slowly with frequency, move both phases alike and τ far less.  The sweep
must resolve the phase: where it turns by more than 90° between neighbouring points the group
delay is not given (NaN) -- an unwrapped phase could be a turn off (sweep more points).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from lineproof import metrics
from lineproof.values import BandLimit, MarkerReading

#: Largest phase step between neighbouring points at which group delay is given.
_RESOLVED_RAD = math.pi / 2


@dataclass(frozen=True, eq=False)
class TransmissionTrace:
    """S21 of a device over the sweep, the expanded uncertainty of its insertion loss (dB) and
    of its phase (rad)."""

    s21: np.ndarray
    loss_expanded_db: np.ndarray | None
    phase_expanded_rad: np.ndarray | None


@dataclass(frozen=True, eq=False)
class MatchTrace:
    """The headline match figure: its name, |Γ| and expanded uncertainty over the sweep."""

    figure: str
    magnitude: np.ndarray
    expanded: np.ndarray | None


def group_delay(frequencies_hz: np.ndarray, transmission: TransmissionTrace) -> tuple[np.ndarray, np.ndarray | None]:
    """Group delay (s) at every point -- NaN where the sweep does not resolve the phase -- and
    its expanded uncertainty (None when the phase has none).  The differences of
    :func:`lineproof.metrics.group_delay_s`, taken from the phase steps wrapped into [-π, π)
    (what unwrapping does), once for both the delay and the resolution check."""
    f = np.asarray(frequencies_hz, dtype=float)
    steps = np.diff(np.angle(transmission.s21))
    steps += np.pi
    np.remainder(steps, 2 * np.pi, out=steps)
    steps -= np.pi
    below = np.concatenate(([0], np.arange(f.size - 1)))  # the neighbours each difference spans
    above = np.concatenate((np.arange(1, f.size), [f.size - 1]))
    turned = np.empty(f.size)  # the phase change from below to above: one or two steps
    turned[0], turned[-1] = steps[0], steps[-1]
    turned[1:-1] = steps[:-1] + steps[1:]
    span = 2 * np.pi * (f[above] - f[below])
    tau = -turned / span
    coarse = np.abs(steps) > _RESOLVED_RAD
    unresolved = np.zeros(f.size, dtype=bool)
    unresolved[:-1] |= coarse
    unresolved[1:] |= coarse
    tau[unresolved] = np.nan
    u = transmission.phase_expanded_rad
    return tau, None if u is None else (u[below] + u[above]) / span


def read_markers(frequencies_hz: np.ndarray, markers: Mapping[str, float], match: MatchTrace | None,
                 transmission: TransmissionTrace | None) -> tuple[MarkerReading, ...]:
    """Each marker's reading (see the module docstring); a marker outside the sweep is refused."""
    f = np.asarray(frequencies_hz, dtype=float)
    delays = group_delay(f, transmission) if transmission is not None and f.size > 1 else None
    readings = []
    for name, hz in markers.items():
        i = metrics.marker_index(f, hz)
        found: dict[str, object] = {}
        if match is not None:
            found.update(reflection=float(match.magnitude[i]), figure=match.figure,
                         expanded_uncertainty=_at(match.expanded, i))
        else:
            found.update(reflection=None, figure=None)
        if transmission is not None:
            found.update(insertion_loss_db=float(metrics.insertion_loss_db(transmission.s21[i])),
                         insertion_loss_uncertainty_db=_at(transmission.loss_expanded_db, i),
                         phase_deg=float(np.degrees(np.angle(transmission.s21[i]))),
                         phase_uncertainty_deg=None if transmission.phase_expanded_rad is None
                         else float(np.degrees(transmission.phase_expanded_rad[i])))
        if delays is not None:
            found.update(group_delay_s=float(delays[0][i]), group_delay_uncertainty_s=_at(delays[1], i))
        if float(f[i]) != float(hz):
            found.update(requested_hz=float(hz))
        readings.append(MarkerReading(name, float(f[i]), **found))  # type: ignore[arg-type]
    return tuple(readings)


def band_group_delay(frequencies_hz: np.ndarray, delays: np.ndarray, band: BandLimit) -> tuple[float, float]:
    """Smallest and largest group delay over the band's points (NaN when any is unresolved)."""
    inside = delays[metrics.band_indices(np.asarray(frequencies_hz, dtype=float), band)]
    if inside.size == 0 or np.isnan(inside).any():
        return math.nan, math.nan
    return float(inside.min()), float(inside.max())


def _at(values: np.ndarray | None, index: int) -> float | None:
    return None if values is None else float(values[index])
