"""Proving a calibration with a check standard.

Right after calibrating, and again every N devices, every T minutes and at the end of a
batch, the check standard is measured (J times, reconnected each time, when the sequence
asks for repeats) with the calibration in use, and its |Γ| compared with its reference: a
Touchstone file of its certified values, a circuit model, or a nominal VSWR.

Two criteria:

- **En** (when the reference has a stated uncertainty): per band, the normalized error of
  the band's mean |Γ|, En = |measured - reference| / sqrt(U_meas² + U_ref²), with U_meas the
  expanded uncertainty lineproof itself states for the reading (its mean over the band's
  points) and U_ref the reference's.  The check agrees when |En| <= 1 in every band: En as
  ISO 13528:2015 §9.7 defines it and ISO/IEC 17043:2010 Annex B lists it among the performance
  statistics, |En| <= 1 satisfactory (clause and annex from memory; the formula as the NIST
  Dataplot reference manual states ISO 13528's En score).
- **A fixed tolerance** (no reference uncertainty given): the largest deviation of |Γ| at any
  point of the sweep must stay within it.

The band means are also the figures of the check standard's history and control chart
(:mod:`lineproof.check_history`); a failed check puts the results since the last passing
check in doubt (:mod:`lineproof.run_checks`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from lineproof import metrics, steps
from lineproof.check_standards import ReferenceModel
from lineproof.control_chart import ChartPoint
from lineproof.errors import InputError
from lineproof.uncertainty import reflection_uncertainty
from lineproof.values import BandLimit, CalibrationRecord, VerificationBand, VerificationResult

#: The criterion's text, as records carry it.
EN_CRITERION = "En <= 1 per band (ISO/IEC 17043:2010 Annex B; ISO 13528:2015 9.7)"
TOLERANCE_CRITERION = "largest deviation of |reflection| within the tolerance"


def read_reference(path: Path) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies (Hz) and complex reflection of a one-port Touchstone reference file."""
    import skrf

    try:
        network = skrf.Network(str(path))
    except Exception as exc:  # scikit-rf raises many kinds on a malformed file
        raise InputError(f"cannot read the Touchstone reference ({type(exc).__name__}: {exc})"[:300],
                         path=str(path), fix="give a Touchstone .s1p file of the check standard") from exc
    if network.nports != 1:
        raise InputError(f"the reference has {network.nports} ports, a check standard here has 1", path=str(path),
                         fix="give the check standard's one-port (.s1p) data")
    return np.asarray(network.f, dtype=float), np.asarray(network.s[:, 0, 0])


@dataclass(frozen=True, eq=False)
class CheckReference:
    """What the check standard should read on the sweep's grid: |Γ| and, when stated, the
    expanded uncertainty of that reference at each point."""

    magnitude: np.ndarray
    expanded_uncertainty: np.ndarray | None = None


def reference_magnitude(frequencies_hz: np.ndarray, reference_file: Path | None,
                        reference_vswr: float | None, model: ReferenceModel | None = None) -> np.ndarray:
    """The reference |Γ| on the measured grid (linear interpolation of a file's magnitude)."""
    if reference_file is not None:
        frequencies, reflection = read_reference(reference_file)
        return np.interp(frequencies_hz, frequencies, np.abs(reflection))
    if model is not None:
        return np.abs(model.reflection(frequencies_hz))
    assert reference_vswr is not None
    return np.full(np.shape(frequencies_hz), float(metrics.reflection_from_vswr(reference_vswr)))


def reference_uncertainty(frequencies_hz: np.ndarray, stated: float | Sequence[tuple[float, float]]) -> np.ndarray:
    """The reference's expanded uncertainty on the grid: one figure, or (frequency, U) pairs
    interpolated linearly (held beyond the ends)."""
    f = np.asarray(frequencies_hz, dtype=float)
    if isinstance(stated, int | float):
        return np.full(f.shape, float(stated))
    pairs = sorted(stated)
    return np.interp(f, [p[0] for p in pairs], [p[1] for p in pairs])


def normalized_error(measured: float, reference: float, measured_u: float, reference_u: float) -> float:
    """En = |measured - reference| / sqrt(U_meas² + U_ref²), both U expanded (k = 2)."""
    combined = math.hypot(measured_u, reference_u)
    if combined == 0.0:
        return 0.0 if measured == reference else math.inf
    return abs(measured - reference) / combined


@dataclass(frozen=True, eq=False)
class CheckReading:
    """The check standard measured J times: each repeat's |Γ| and its expanded uncertainty."""

    frequencies_hz: np.ndarray
    magnitudes: np.ndarray  # (J, points)
    expanded_uncertainty: np.ndarray  # (points,), of one reading

    @property
    def repeats(self) -> int:
        return int(self.magnitudes.shape[0])

    @property
    def mean(self) -> np.ndarray:
        return np.mean(self.magnitudes, axis=0)


def _judge_band(band: BandLimit, reading: CheckReading, reference: CheckReference, deviation: np.ndarray,
                tolerance: float | None, calibration_id: str) -> tuple[VerificationBand, ChartPoint] | None:
    inside = np.flatnonzero(metrics.band_mask(reading.frequencies_hz, band))
    if inside.size == 0:
        return None
    worst = inside[int(np.argmax(deviation[inside]))]
    per_repeat = np.mean(reading.magnitudes[:, inside], axis=1)
    measured = float(np.mean(per_repeat))
    expected = float(np.mean(reference.magnitude[inside]))
    spread = float(np.std(per_repeat, ddof=1)) if reading.repeats >= 2 else None
    point = ChartPoint(measured, spread, reading.repeats, calibration_id)
    if reference.expanded_uncertainty is None:
        assert tolerance is not None
        return VerificationBand(band.name, band.start_hz, band.stop_hz, measured, expected, float(deviation[worst]),
                                float(reading.frequencies_hz[worst]), tolerance), point
    measured_u = float(np.mean(reading.expanded_uncertainty[inside]))
    reference_u = float(np.mean(reference.expanded_uncertainty[inside]))
    en = normalized_error(measured, expected, measured_u, reference_u)
    return VerificationBand(band.name, band.start_hz, band.stop_hz, measured, expected, float(deviation[worst]),
                            float(reading.frequencies_hz[worst]), math.hypot(measured_u, reference_u), en,
                            measured_u, reference_u), point


def judge_check(name: str, calibration_id: str, reading: CheckReading, reference: CheckReference,
                tolerance: float | None, bands: tuple[BandLimit, ...],
                devices_before: int) -> tuple[VerificationResult, dict[str, ChartPoint]]:
    """Judge the reading band by band (En, or the fixed tolerance over the sweep); returns the
    result and each band's chart point (the band's mean |Γ| over the repeats, with its calibration)."""
    deviation = np.abs(reading.mean - reference.magnitude)
    worst = int(np.argmax(deviation))
    judged, points = [], {}
    for band in bands:
        found = _judge_band(band, reading, reference, deviation, tolerance, calibration_id)
        if found is not None:
            judged.append(found[0])
            points[band.name] = found[1]
    en = max((b.en for b in judged if b.en is not None), default=None)
    if en is not None:
        deciding = max(judged, key=lambda b: b.en or 0.0)
        allowed = deciding.tolerance
    else:
        assert tolerance is not None
        allowed = tolerance
    result = VerificationResult(
        name, calibration_id, datetime.now(UTC).isoformat(timespec="seconds"), devices_before,
        float(deviation[worst]), float(reading.frequencies_hz[worst]), allowed, tuple(judged), en,
        repeats=reading.repeats)
    return result, points


def measure_check_standard(station: steps.Station, cal: CalibrationRecord, name: str, repeats: int = 1) -> CheckReading:
    """Connect the check standard ``repeats`` times (a reconnection each time, so that the
    spread includes the connector's repeatability) and read it with ``cal``."""
    magnitudes = []
    frequencies = corrected = None
    for index in range(repeats):
        again = f" (measurement {index + 1} of {repeats}: disconnect and connect it again)" if index else ""
        station.operator.connect(station.port, name, None,
                                 f"Connect the check standard {name} alone to port {station.port}{again}")
        frequencies, corrected = steps.measure_corrected(station, cal)
        magnitudes.append(np.abs(corrected))
    assert frequencies is not None and corrected is not None
    spread = reflection_uncertainty(cal.residuals, corrected, frequencies, station.uncertainty,
                                    interpolation_error=cal.interpolation_error)
    return CheckReading(frequencies, np.array(magnitudes), spread.expanded)
