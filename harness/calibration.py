"""Calibration math: solve error terms from measured standards, apply them to raw data.

Pure functions on arrays and value types -- no instrument in sight.  The one-port solve uses
scikit-rf's ``OnePort`` (least squares over the standards); applying the terms uses the
closed form below, which is exact and about a thousand times faster than
``OnePort.apply_cal`` at 10,001 points, and refuses a grid that differs from the
calibration's instead of silently dropping frequencies.

One-port error model (three terms; Agilent AN 1287-3, cited from memory)::

    Γm = e00 + e10e01 Γ / (1 - e11 Γ)      =>      Γ = (Γm - e00) / (e11 (Γm - e00) + e10e01)
"""

from __future__ import annotations

import uuid
import warnings
from collections.abc import Mapping
from datetime import UTC, datetime

import numpy as np

from lineproof.errors import CalibrationError
from lineproof.values import CalibrationRecord, InstrumentIdentity, SweepPlan

ONE_PORT_METHOD = "one-port (open, short, load)"
ONE_PORT_TERMS = ("directivity", "source_match", "reflection_tracking")

#: Largest condition number of the per-frequency standards matrix we accept.  Above it the
#: standards are too alike at some frequency (e.g. an open and a short a half-wave apart).
_MAX_CONDITION = 1e6
#: Two grids are the same grid when they agree to this relative tolerance.
_GRID_RTOL = 1e-9


def _same_grid(a: np.ndarray, b: np.ndarray) -> bool:
    return a.shape == b.shape and bool(np.allclose(a, b, rtol=_GRID_RTOL, atol=0.0))


def check_condition(ideals: Mapping[str, np.ndarray], measured: Mapping[str, np.ndarray]) -> None:
    """Refuse a solve whose standards do not separate the three unknowns.

    The per-frequency system is Γm_i = e00 + Γ_i Γm_i e11 - Γ_i Δe (one row per standard);
    its matrix must be well conditioned at every frequency.
    """
    names = list(ideals)
    rows = np.stack(
        [np.stack([np.ones_like(ideals[n]), ideals[n] * measured[n], -ideals[n]], axis=-1) for n in names],
        axis=-2,
    )
    condition = np.linalg.cond(rows)
    worst = int(np.argmax(condition))
    if not np.isfinite(condition[worst]) or condition[worst] > _MAX_CONDITION:
        raise CalibrationError(
            f"the standards ({', '.join(names)}) do not separate the error terms at point {worst} "
            f"(condition number {condition[worst]:.3g}); check that each standard was connected "
            "when asked and that the kit definition matches the standards"
        )


def solve_one_port(
    frequencies_hz: np.ndarray,
    measured: Mapping[str, np.ndarray],
    ideals: Mapping[str, np.ndarray],
) -> dict[str, np.ndarray]:
    """Error terms from three or more one-port standards (measured raw and model ideal)."""
    import skrf
    from skrf.calibration import OnePort

    missing = [name for name in ideals if name not in measured]
    if missing or len(ideals) < 3:
        raise CalibrationError(
            f"a one-port calibration needs three standards measured; missing {', '.join(missing) or 'standards'}"
        )
    f = np.asarray(frequencies_hz, dtype=float)
    for name in ideals:
        if measured[name].shape != f.shape or ideals[name].shape != f.shape:
            raise CalibrationError(f"standard {name} was measured on a different grid from the others")
    check_condition(ideals, measured)
    frequency = skrf.Frequency.from_f(f, unit="Hz")
    names = list(ideals)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        calibration = OnePort(
            measured=[skrf.Network(frequency=frequency, s=measured[n], name=n) for n in names],
            ideals=[skrf.Network(frequency=frequency, s=ideals[n], name=n) for n in names],
        )
        calibration.run()
        coefs = calibration.coefs
    return {
        "directivity": np.asarray(coefs["directivity"]).reshape(-1),
        "source_match": np.asarray(coefs["source match"]).reshape(-1),
        "reflection_tracking": np.asarray(coefs["reflection tracking"]).reshape(-1),
    }


def make_record(
    method: str,
    terms: Mapping[str, np.ndarray],
    frequencies_hz: np.ndarray,
    plan: SweepPlan,
    instrument: InstrumentIdentity,
    kit_name: str,
    kit_hash: str,
    reference_impedance_ohm: float,
) -> CalibrationRecord:
    now = datetime.now(UTC)
    return CalibrationRecord(
        calibration_id=f"cal-{now:%Y%m%dT%H%M%SZ}-{uuid.uuid4().hex[:6]}",
        method=method,
        kit_name=kit_name,
        kit_hash=kit_hash,
        created_utc=now.isoformat(timespec="seconds"),
        instrument=instrument,
        plan=plan,
        reference_impedance_ohm=reference_impedance_ohm,
        frequencies_hz=frequencies_hz,
        terms=terms,
    )


def correct_one_port(calibration: CalibrationRecord, frequencies_hz: np.ndarray, raw: np.ndarray) -> np.ndarray:
    """Corrected reflection from raw, on exactly the calibration's grid."""
    if not _same_grid(np.asarray(frequencies_hz, dtype=float), calibration.frequencies_hz):
        raise CalibrationError(
            f"the sweep grid differs from the grid of calibration {calibration.calibration_id} "
            f"({calibration.plan.describe()}); calibrate again for this sweep"
        )
    missing = [name for name in ONE_PORT_TERMS if name not in calibration.terms]
    if missing:
        raise CalibrationError(f"calibration {calibration.calibration_id} lacks {', '.join(missing)}")
    e00 = calibration.terms["directivity"]
    e11 = calibration.terms["source_match"]
    e10e01 = calibration.terms["reflection_tracking"]
    difference = np.asarray(raw) - e00
    return difference / (e11 * difference + e10e01)
