"""Calibration math: choose a method, solve error terms from measured standards, apply them.

Pure functions on arrays and value types -- no instrument in sight.  Two-port methods live
in :mod:`lineproof.two_port`; persisted calibrations in :mod:`lineproof.calstore`.

One-port error model (three terms; Agilent AN 1287-3, "Applying Error Correction to Network
Analyzer Measurements", cited from memory)::

    Γm = e00 + e10e01 Γ / (1 - e11 Γ)      =>      Γ = (Γm - e00) / (e11 (Γm - e00) + e10e01)

With three standards the terms follow from the linear system (one row per standard)
Γm_i = e00 + Γ_i Γm_i e11 - Γ_i Δe, Δe = e00 e11 - e10e01, solved here for every frequency
at once; with more standards scikit-rf's ``OnePort`` (least squares) solves it.  The tests
check both against each other and against the textbook closed form for ideal standards.
Applying the terms uses the closed form above: exact, about a thousand times faster than
``OnePort.apply_cal`` at 10,001 points, correct at any reference impedance, and it refuses a
grid that differs from the calibration's instead of silently dropping frequencies.
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
ONE_PATH_METHOD = "two-port one-path (forward only, reverse by reversing the device)"
FULL_TWO_PORT_METHOD = "full two-port SOLT (12-term)"
THRU_RESPONSE_METHOD = "thru response (transmission normalization)"
ONE_PORT_TERMS = ("directivity", "source_match", "reflection_tracking")

#: What each analyzer capability (profile ``capabilities.paths``) allows, best first.
METHODS_BY_PATHS = {
    "reflection": (ONE_PORT_METHOD,),
    "forward": (ONE_PATH_METHOD, THRU_RESPONSE_METHOD, ONE_PORT_METHOD),
    "full": (FULL_TWO_PORT_METHOD, ONE_PATH_METHOD, THRU_RESPONSE_METHOD, ONE_PORT_METHOD),
}
#: Short names a sequence may use to ask for a method.
METHOD_NAMES = {
    "one-port": ONE_PORT_METHOD,
    "one-path": ONE_PATH_METHOD,
    "solt": FULL_TWO_PORT_METHOD,
    "thru-response": THRU_RESPONSE_METHOD,
}

#: Largest condition number of the per-frequency standards matrix we accept.  Above it the
#: standards are too alike at some frequency (e.g. an open and a short a half-wave apart).
_MAX_CONDITION = 1e6
#: Two grids are the same grid when they agree to this relative tolerance.
_GRID_RTOL = 1e-9


def choose_method(paths: str, wanted: str | None = None) -> str:
    """The calibration method for an analyzer whose profile says ``paths``
    ("reflection" | "forward" | "full"): the best it allows, or ``wanted`` (a short name
    from :data:`METHOD_NAMES`) when the analyzer can do it."""
    if paths not in METHODS_BY_PATHS:
        raise CalibrationError(f"unknown analyzer paths {paths!r}; a profile says reflection, forward or full")
    allowed = METHODS_BY_PATHS[paths]
    if wanted is None:
        return allowed[0]
    if wanted not in METHOD_NAMES:
        raise CalibrationError(f"unknown calibration method {wanted!r}; use one of {', '.join(METHOD_NAMES)}")
    method = METHOD_NAMES[wanted]
    if method not in allowed:
        raise CalibrationError(
            f"the analyzer measures {paths} paths only, so it cannot do a {wanted} calibration; "
            f"it can do: {', '.join(k for k, v in METHOD_NAMES.items() if v in allowed)}")
    return method


def same_grid(a: np.ndarray, b: np.ndarray) -> bool:
    """Whether two frequency grids are the same grid (equal to a relative 1e-9)."""
    if a.shape != b.shape:
        return False
    # Equal arrays are the usual case and cost a fifth of the tolerant comparison.
    return bool(np.array_equal(a, b)) or bool(np.allclose(a, b, rtol=_GRID_RTOL, atol=0.0))


def require_grid(calibration: CalibrationRecord, frequencies_hz: np.ndarray) -> None:
    """Refuse data on a grid other than the calibration's (see :mod:`lineproof.calstore`
    for moving a calibration onto another grid)."""
    if not same_grid(np.asarray(frequencies_hz, dtype=float), calibration.frequencies_hz):
        raise CalibrationError(
            f"the sweep grid differs from the grid of calibration {calibration.calibration_id} "
            f"({calibration.plan.describe()}); calibrate again for this sweep, or move the "
            "calibration onto it with calstore.fit_to_sweep"
        )


def _standards_matrix(ideals: Mapping[str, np.ndarray], measured: Mapping[str, np.ndarray]) -> np.ndarray:
    return np.stack(
        [np.stack([np.ones_like(ideals[n]), ideals[n] * measured[n], -ideals[n]], axis=-1) for n in ideals],
        axis=-2,
    )


def check_condition(ideals: Mapping[str, np.ndarray], measured: Mapping[str, np.ndarray]) -> None:
    """Refuse a solve whose standards do not separate the three unknowns.

    The per-frequency system is Γm_i = e00 + Γ_i Γm_i e11 - Γ_i Δe (one row per standard);
    its matrix must be well conditioned at every frequency.
    """
    condition = np.linalg.cond(_standards_matrix(ideals, measured))
    worst = int(np.argmax(np.where(np.isfinite(condition), condition, np.inf)))
    if not np.isfinite(condition[worst]) or condition[worst] > _MAX_CONDITION:
        raise CalibrationError(
            f"the standards ({', '.join(ideals)}) do not separate the error terms at point {worst} "
            f"(condition number {condition[worst]:.3g}); check that each standard was connected "
            "when asked and that the kit definition matches the standards"
        )


def _check_standards(frequencies_hz: np.ndarray, measured: Mapping[str, np.ndarray],
                     ideals: Mapping[str, np.ndarray]) -> None:
    missing = [name for name in ideals if name not in measured]
    if missing or len(ideals) < 3:
        raise CalibrationError(
            f"a one-port calibration needs three standards measured; missing {', '.join(missing) or 'standards'}"
        )
    for name in ideals:
        if measured[name].shape != frequencies_hz.shape or ideals[name].shape != frequencies_hz.shape:
            raise CalibrationError(
                f"standard {name} was measured on a different grid from the others "
                f"({measured[name].size} points, the calibration grid has {frequencies_hz.size}); "
                "measure every standard with the same sweep plan")


def solve_one_port(
    frequencies_hz: np.ndarray,
    measured: Mapping[str, np.ndarray],
    ideals: Mapping[str, np.ndarray],
) -> dict[str, np.ndarray]:
    """Error terms from three or more one-port standards (measured raw and model ideal)."""
    f = np.asarray(frequencies_hz, dtype=float)
    _check_standards(f, measured, ideals)
    check_condition(ideals, {name: measured[name] for name in ideals})
    if len(ideals) > 3:
        return _solve_least_squares(f, measured, ideals)
    matrix = _standards_matrix(ideals, measured)
    right = np.stack([measured[n] for n in ideals], axis=-1)
    e00, e11, delta = np.moveaxis(np.linalg.solve(matrix, right[..., None])[..., 0], -1, 0)
    return {"directivity": e00, "source_match": e11, "reflection_tracking": e00 * e11 - delta}


def _solve_least_squares(f: np.ndarray, measured: Mapping[str, np.ndarray],
                         ideals: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
    import skrf
    from skrf.calibration import OnePort

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
    residuals: Mapping[str, np.ndarray] | None = None,
    temperature_c: float | None = None,
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
        residuals=residuals or {},
        temperature_c=temperature_c,
    )


def one_port_terms(calibration: CalibrationRecord, prefix: str = "") -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(e00, e11, e10e01) of a one-port calibration, or of one direction of a two-port one
    (``prefix`` "forward." or "reverse.")."""
    names = [prefix + name for name in ONE_PORT_TERMS]
    missing = [name for name in names if name not in calibration.terms]
    if missing:
        raise CalibrationError(f"calibration {calibration.calibration_id} ({calibration.method}) lacks "
                               f"{', '.join(missing)}; it cannot correct this measurement")
    return calibration.terms[names[0]], calibration.terms[names[1]], calibration.terms[names[2]]


def correct_reflection(directivity: np.ndarray, source_match: np.ndarray, tracking: np.ndarray,
                       raw: np.ndarray) -> np.ndarray:
    """Γ = (Γm - e00) / (e11 (Γm - e00) + e10e01), element by element."""
    difference = np.asarray(raw) - directivity
    return difference / (source_match * difference + tracking)


def embed_reflection(directivity: np.ndarray, source_match: np.ndarray, tracking: np.ndarray,
                     gamma: np.ndarray) -> np.ndarray:
    """What a raw receiver reads for a true Γ: e00 + e10e01 Γ / (1 - e11 Γ)."""
    return directivity + tracking * gamma / (1 - source_match * gamma)


def correct_one_port(calibration: CalibrationRecord, frequencies_hz: np.ndarray, raw: np.ndarray) -> np.ndarray:
    """Corrected reflection from raw, on exactly the calibration's grid."""
    require_grid(calibration, frequencies_hz)
    prefix = "" if "directivity" in calibration.terms else "forward."
    return correct_reflection(*one_port_terms(calibration, prefix), raw)
