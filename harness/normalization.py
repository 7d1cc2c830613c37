"""Thru response (normalization): transmission corrected for tracking only, and the mismatch
it leaves, carried into the uncertainty of insertion loss and phase.

A thru-response calibration divides the device's raw S21 by the thru's raw S21 (over the
thru's model): tracking goes, mismatch stays.  In the 12-term model (Agilent AN 1287-3, cited
from memory) the forward raw transmission is S21m = ETF S21 / D with

    D     = 1 - ΓS S11 - ΓL S22 + ΓS ΓL ΔS        (the device between the ports)
    Dthru = 1 - ΓS t11 - ΓL t22 + ΓS ΓL Δt         (the thru, as its model says)

ΓS, ΓL the analyzer's raw source match at port 1 and load match at port 2, ΔS = S11 S22 -
S21 S12.  The normalized reading is S21n = S21 Dthru / D.  Neither ΓS nor ΓL is measured by a
thru response; the analyzer's data sheet states how large they may be (``[station.uncertainty]
raw_source_match_db``, ``raw_load_match_db``).  Nor is the device's match measured: it is
bounded by what the device's own transmission allows a passive device, |S11|² + |S21|² <= 1
and, reciprocal, |S22|² + |S21|² <= 1 (a passive network's scattering matrix is a
contraction; D. M. Pozar, Microwave Engineering, §4.3, from memory) -- tight where it matters
most, in a filter's stopband (|S11| near 1), and loose for a well-matched device, whose
specified match a sequence may state instead (``[measurement] device_max_vswr``, within the
bands).  Factored, D = (1 - ΓS S11)(1 - ΓL S22) - ΓS ΓL S21 S12, and with every phase free

    (1 - |ΓS| s11)(1 - |ΓL| s22) - |ΓS||ΓL| s21²  <=  |D|  <=  (1 + |ΓS| s11)(1 + |ΓL| s22) + |ΓS||ΓL| s21²

(s11, s22, s21 bounds of the device's magnitudes), and Dthru alike from the thru's model;
|S21n| / |S21| = |Dthru| / |D| lies between the smallest and the largest quotient.  These are
the mismatch paths of a two-port between two mismatched ports, each of unknown phase: the
two-port form of the limits 20 log10(1 ± |Γ1||Γ2|) of
:func:`lineproof.uncertainty.mismatch_limits_db` (tests/unit/test_normalization.py holds both
against the published example and the 12-term model).  The true |S21| lies within the
bounds of the reading, which bound the device's match in turn: a few rounds tighten both
(each round's bound holds because the one before it did).

The uncertainty: the mismatch as one contribution of unknown phase bounded by the larger
side M (dB), U-shaped, u = M/√2 (I. A. Harris and F. L. Warner, IEE Proc. H 128(1), 1981),
the thru statement and its connection (:func:`lineproof.uncertainty.transmission_model`) and
trace noise normal; U = k u with k from :func:`lineproof.uncertainty.coverage_factor` (1.41 when
the bounded term dominates: U is then 0.9975 M, the 95.45 % quantile of the U-shape).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from lineproof import metrics, two_port
from lineproof.errors import CalibrationError
from lineproof.uncertainty import UncertaintySettings, coverage_factor, estimate_trace_noise
from lineproof.values import BandLimit, CalibrationRecord

#: Rounds of tightening the device's match bound with its transmission bound (each holds;
#: three more than the first change nothing visible: the ratio bounds move by < 1e-6 dB).
_ROUNDS = 4
_DB = 20 / math.log(10)
#: Where the mismatch bound stops meaning anything (|D| may be zero).
_NO_BOUND = 0.999


@dataclass(frozen=True, eq=False)
class MismatchBounds:
    """Per point: the bounds of |S21n| / |S21| a normalization's mismatch allows, the phase it
    may turn (rad), and the bound on the device's |S11| and |S22| used."""

    low: np.ndarray
    high: np.ndarray
    phase: np.ndarray
    device_match: np.ndarray

    @property
    def loss_db(self) -> np.ndarray:
        """The larger side of the insertion-loss error the mismatch may make (dB)."""
        return np.maximum(_DB * np.log(self.high), -_DB * np.log(self.low))


def mismatch_bounds(s21_normalized: np.ndarray, source_match: float, load_match: float,
                    thru: tuple[np.ndarray, np.ndarray, np.ndarray],
                    device_match: np.ndarray | float = 1.0) -> MismatchBounds:
    """The bounds above for a normalized reading, the analyzer's |ΓS| and |ΓL|, and the thru's
    model (t11, t21 t12, t22).  ``device_match``: what is known of the device's |S11| and
    |S22| beforehand (a specification; 1: nothing), tightened by the passive bound round by round."""
    magnitude = np.abs(np.asarray(s21_normalized))
    t11, t21t12, t22 = (np.abs(np.asarray(part)) for part in thru)
    thru_low, thru_high, thru_turn = _determinant(source_match, load_match, t11, t22, t21t12)
    through = np.ones(magnitude.shape)  # the true |S21|, at most
    match = np.minimum(np.broadcast_to(np.asarray(device_match, dtype=float), magnitude.shape), 1.0)
    for _ in range(_ROUNDS):
        found = _ratio(source_match, load_match, match, through, thru_low, thru_high, thru_turn)
        lowest = np.minimum(1.0, magnitude / found.high)  # the true |S21| is at least this
        through = np.minimum(through, magnitude / found.low)
        match = np.minimum(match, np.sqrt(1 - lowest**2))
    return _ratio(source_match, load_match, match, through, thru_low, thru_high, thru_turn)


def _determinant(source: float, load: float, s11: np.ndarray, s22: np.ndarray,
                 s21s12: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Bounds of |D| and of arg D for D = (1 - ΓS S11)(1 - ΓL S22) - ΓS ΓL S21 S12 (the form
    above, factored: the three terms' phases are free, so both bounds are reached)."""
    u, v, w = source * s11, load * s22, source * load * s21s12
    low = (1 - u) * (1 - v) - w
    high = (1 + u) * (1 + v) + w
    with np.errstate(divide="ignore", invalid="ignore"):
        # arg(1 - x) for |x| <= a < 1 lies within ±asin(a)
        turn = np.arcsin(np.minimum(u, 1)) + np.arcsin(np.minimum(v, 1)) + np.arcsin(
            np.clip(w / ((1 - u) * (1 - v)), 0, 1))
    return np.maximum(low, 1 - _NO_BOUND), high, np.where(low > 0, turn, np.pi)


def _ratio(source: float, load: float, match: np.ndarray, through: np.ndarray, thru_low: np.ndarray,
           thru_high: np.ndarray, thru_turn: np.ndarray) -> MismatchBounds:
    low, high, turn = _determinant(source, load, match, match, through * through)
    return MismatchBounds(thru_low / high, thru_high / low, turn + thru_turn, match)


@dataclass(frozen=True, eq=False)
class NormalizedTransmission:
    """A device's S21 corrected by a thru response: insertion loss (dB) and its expanded
    uncertainty (dB), the expanded uncertainty of the phase (rad), the mismatch bound alone."""

    s21: np.ndarray
    loss_db: np.ndarray
    loss_expanded_db: np.ndarray
    phase_expanded_rad: np.ndarray
    bounds: MismatchBounds


def stated_match(settings: UncertaintySettings) -> tuple[float, float]:
    """The analyzer's stated raw source and load match, or CalibrationError saying what to state."""
    if settings.raw_source_match is None or settings.raw_load_match is None:
        raise CalibrationError("a thru-response measurement leaves the analyzer's source and load match uncorrected, "
                               "and the station does not state them; add raw_source_match_db and raw_load_match_db "
                               "(uncorrected port match from the analyzer's data sheet) to [station.uncertainty]")
    return settings.raw_source_match, settings.raw_load_match


def normalize(cal: CalibrationRecord, frequencies_hz: np.ndarray, raw_s21: np.ndarray,
              settings: UncertaintySettings, device_match: np.ndarray | float = 1.0) -> NormalizedTransmission:
    """S21 of a device from its raw S21 and a thru-response calibration, with the uncertainty
    of its insertion loss and phase at every point (see the module docstring);
    ``device_match`` as for :func:`mismatch_bounds`."""
    source, load = stated_match(settings)
    s21 = two_port.correct_transmission(cal, frequencies_hz, raw_s21)
    residuals = cal.residuals
    thru = (_part(residuals, "thru.s11", s21), _part(residuals, "thru.s21s12", s21, 1.0),
            _part(residuals, "thru.s22", s21))
    bounds = mismatch_bounds(s21, source, load, thru, device_match)
    through = np.maximum(np.abs(s21), 1e-12)
    sigma = settings.trace_noise if settings.trace_noise is not None else estimate_trace_noise(s21)
    noise = (sigma / through) ** 2 + (cal.interpolation_error or 0.0) ** 2 / 2  # and a reused calibration's moving
    magnitude = _part(residuals, "transmission.magnitude_variance", s21).real + noise
    phase = _part(residuals, "transmission.phase_variance", s21).real + noise
    return NormalizedTransmission(
        s21, metrics.insertion_loss_db(s21),
        _expanded(bounds.loss_db / math.sqrt(2), _DB * np.sqrt(magnitude), settings),
        _expanded(bounds.phase / math.sqrt(2), np.sqrt(phase), settings), bounds)


def stated_device_match(frequencies_hz: np.ndarray, bands: Sequence[BandLimit], max_vswr: float | None) -> np.ndarray:
    """What is known of the devices' |S11| and |S22| before they are measured: their specified
    VSWR within the bands (where a specification applies), nothing (1) elsewhere."""
    known = np.ones(np.shape(frequencies_hz))
    if max_vswr is not None:
        for band in bands:
            known[metrics.band_indices(frequencies_hz, band)] = (max_vswr - 1) / (max_vswr + 1)
    return known


def _part(residuals: Mapping[str, np.ndarray], name: str, like: np.ndarray, default: complex = 0.0) -> np.ndarray:
    value = residuals.get(name)
    return np.full(like.shape, default, complex) if value is None else np.asarray(value)


def _expanded(bounded: np.ndarray, normal: np.ndarray, settings: UncertaintySettings) -> np.ndarray:
    """k u of a bounded contribution of unknown phase (its standard uncertainty ``bounded``)
    with normal ones: k from the share of the bounded one (GUM G.6.5-G.6.6), or as stated."""
    total = np.hypot(bounded, normal)
    if settings.coverage_factor is not None:
        return settings.coverage_factor * total
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(total > 0, bounded / total, 0.0)
    return coverage_factor(share, 1.0) * total
