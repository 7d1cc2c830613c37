"""Proving a calibration with a check standard.

Right after calibrating, and again every N devices, every T minutes and at the end of a
batch, the check standard is measured with the calibration in use and its |Γ| compared with
its reference (a Touchstone file of its certified values, or a nominal VSWR).  The
calibration is proven when the largest deviation of |Γ| stays within the stated tolerance at
every point of the sweep.  (Labs watch the same figure on a control chart over time; a
failed check puts the results since the last passing check in doubt.)
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from lineproof import metrics, steps
from lineproof.errors import InputError
from lineproof.values import BandLimit, CalibrationRecord, VerificationBand, VerificationResult


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


def reference_magnitude(frequencies_hz: np.ndarray, reference_file: Path | None,
                        reference_vswr: float | None) -> np.ndarray:
    """The reference |Γ| on the measured grid (linear interpolation of the magnitude)."""
    if reference_file is not None:
        frequencies, reflection = read_reference(reference_file)
        return np.interp(frequencies_hz, frequencies, np.abs(reflection))
    assert reference_vswr is not None
    return np.full(np.shape(frequencies_hz), float(metrics.reflection_from_vswr(reference_vswr)))


def judge_check(name: str, calibration_id: str, frequencies_hz: np.ndarray, measured: np.ndarray,
                reference: np.ndarray, tolerance: float, bands: tuple[BandLimit, ...],
                devices_before: int) -> VerificationResult:
    """Compare measured and reference |Γ| over the sweep and in each band."""
    magnitude = np.abs(measured)
    deviation = np.abs(magnitude - reference)
    worst = int(np.argmax(deviation))
    judged = []
    for band in bands:
        inside = np.flatnonzero(metrics.band_mask(frequencies_hz, band))
        if inside.size == 0:
            continue
        band_worst = inside[int(np.argmax(deviation[inside]))]
        judged.append(VerificationBand(
            band.name, band.start_hz, band.stop_hz, float(np.mean(magnitude[inside])),
            float(np.mean(reference[inside])), float(deviation[band_worst]), float(frequencies_hz[band_worst]), tolerance,
        ))
    return VerificationResult(
        name, calibration_id, datetime.now(UTC).isoformat(timespec="seconds"), devices_before,
        float(deviation[worst]), float(frequencies_hz[worst]), tolerance, tuple(judged),
    )


def verify_with_check_standard(station: steps.Station, cal: CalibrationRecord, name: str, reference: np.ndarray,
                               tolerance: float, bands: tuple[BandLimit, ...], devices_before: int) -> VerificationResult:
    """Connect the check standard, measure it with ``cal`` and judge it (no exception on a
    failed check: the caller decides what a failure stops)."""
    station.operator.connect(station.port, name, None,
                             f"Connect the check standard {name} alone to port {station.port}")
    frequencies, corrected = steps.measure_corrected(station, cal)
    return judge_check(name, cal.calibration_id, frequencies, corrected, reference, tolerance, bands, devices_before)
