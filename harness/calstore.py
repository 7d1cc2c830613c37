"""Calibrations kept between runs: saved, reloaded, checked and fitted to a sweep.

A saved calibration is two files named by its id in one folder: ``<id>.npz`` (NumPy arrays:
the grid, every error term and the residual-error model) and ``<id>.json`` (metadata: id,
method, UTC time, instrument identity, kit name and SHA-256, sweep plan, reference impedance,
temperature when known, and the SHA-256 of the arrays file).  Both are written to a temporary
name, flushed and then renamed, and an existing calibration is never replaced.

Before a saved calibration serves a sweep, :func:`fit_to_sweep` checks the instrument, the
age and the grid: a sweep outside the calibrated span is refused; a sweep inside it on
other frequencies gets the terms interpolated (:mod:`lineproof.resample`) only when the
interpolation's own error estimate, carried through the correction, stays within the stated
tolerance -- and the record then says it was interpolated and by how much it may be off.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
from dataclasses import asdict, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from lineproof.calibration import same_grid
from lineproof.errors import CalibrationError, InputError
from lineproof.resample import covers, resample
from lineproof.values import CalibrationRecord, InstrumentIdentity, SweepPlan

FORMAT = "lineproof-calibration/1"
#: Default largest error (in corrected |Γ| or relative |S21|) that interpolating the terms may add.
DEFAULT_INTERPOLATION_TOLERANCE = 1e-3
#: Default age limit of a calibration (common practice, no published source: recalibrate at
#: least once per working shift, and whenever the temperature moves).
DEFAULT_MAX_AGE_S = 8 * 3600.0


def _atomic_write(path: Path, data: bytes) -> None:
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=".partial-", suffix=path.suffix)
    try:
        with os.fdopen(handle, "wb") as stream:
            stream.write(data)
            stream.flush()
            os.fsync(stream.fileno())
        os.link(temporary, path)  # fails if the name exists: a calibration is never replaced
    finally:
        os.unlink(temporary)


def save_calibration(record: CalibrationRecord, folder: Path) -> Path:
    """Write the calibration's two files into ``folder``; returns the JSON file's path."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    arrays = {"frequencies_hz": record.frequencies_hz}
    arrays.update({f"term:{name}": value for name, value in record.terms.items()})
    arrays.update({f"residual:{name}": value for name, value in record.residuals.items()})
    buffer = _npz_bytes(arrays)
    metadata = {
        "format": FORMAT,
        "calibration_id": record.calibration_id,
        "method": record.method,
        "created_utc": record.created_utc,
        "instrument": asdict(record.instrument),
        "kit": {"name": record.kit_name, "sha256": record.kit_hash},
        "plan": asdict(record.plan),
        "reference_impedance_ohm": record.reference_impedance_ohm,
        "temperature_c": record.temperature_c,
        "interpolation_error": record.interpolation_error,
        "arrays_file": f"{record.calibration_id}.npz",
        "arrays_sha256": hashlib.sha256(buffer).hexdigest(),
    }
    try:
        _atomic_write(folder / metadata["arrays_file"], buffer)
        target = folder / f"{record.calibration_id}.json"
        _atomic_write(target, json.dumps(metadata, indent=2).encode("utf-8"))
    except FileExistsError as exc:
        raise CalibrationError(f"calibration {record.calibration_id} is already saved in {folder}; "
                               "a saved calibration is never replaced") from exc
    return target


def _npz_bytes(arrays: dict[str, np.ndarray]) -> bytes:
    import io

    stream = io.BytesIO()
    np.savez(stream, **arrays)
    return stream.getvalue()


def _field(metadata: dict[str, Any], key: str, kind: type | tuple[type, ...], source: str) -> Any:
    value = metadata.get(key)
    if not isinstance(value, kind) or isinstance(value, bool):
        raise InputError(f"missing or wrong type (got {value!r})", path=source, key=key,
                         fix="this is not a lineproof calibration file, or it was edited; calibrate again")
    return value


def load_calibration(path: Path) -> CalibrationRecord:
    """Read a calibration saved by :func:`save_calibration` (give its ``.json`` file)."""
    path = Path(path)
    source = str(path)
    try:
        metadata = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise InputError(f"cannot read calibration metadata ({exc})", path=source,
                         fix="give the .json file written when the calibration was saved") from exc
    if not isinstance(metadata, dict) or metadata.get("format") != FORMAT:
        raise InputError(f"not a {FORMAT} file", path=source, key="format", fix="give a calibration saved by lineproof")
    arrays_path = path.parent / _field(metadata, "arrays_file", str, source)
    try:
        buffer = arrays_path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read the calibration's arrays ({exc})", path=source, key="arrays_file",
                         fix=f"keep {arrays_path.name} beside {path.name}") from exc
    if hashlib.sha256(buffer).hexdigest() != metadata.get("arrays_sha256"):
        raise InputError(f"{arrays_path.name} does not match the SHA-256 recorded here", path=source,
                         key="arrays_sha256", fix="the arrays file was changed or swapped; calibrate again")
    import io

    with np.load(io.BytesIO(buffer), allow_pickle=False) as stored:
        arrays = {name: stored[name] for name in stored.files}
    try:
        return CalibrationRecord(
            calibration_id=_field(metadata, "calibration_id", str, source),
            method=_field(metadata, "method", str, source),
            kit_name=_field(metadata, "kit", dict, source).get("name", ""),
            kit_hash=metadata["kit"].get("sha256", ""),
            created_utc=_field(metadata, "created_utc", str, source),
            instrument=InstrumentIdentity(**_field(metadata, "instrument", dict, source)),
            plan=SweepPlan(**_field(metadata, "plan", dict, source)),
            reference_impedance_ohm=float(_field(metadata, "reference_impedance_ohm", (int, float), source)),
            frequencies_hz=arrays.pop("frequencies_hz"),
            terms={k[5:]: v for k, v in arrays.items() if k.startswith("term:")},
            residuals={k[9:]: v for k, v in arrays.items() if k.startswith("residual:")},
            temperature_c=metadata.get("temperature_c"),
            interpolation_error=metadata.get("interpolation_error"),
        )
    except (TypeError, ValueError, KeyError) as exc:
        raise InputError(f"the calibration does not hold together ({exc})", path=source,
                         fix="calibrate again") from exc


def age_s(record: CalibrationRecord, now: datetime | None = None) -> float:
    created = datetime.fromisoformat(record.created_utc)
    return ((now or datetime.now(UTC)) - created).total_seconds()


def check_age(record: CalibrationRecord, max_age_s: float, now: datetime | None = None) -> None:
    """Refuse a calibration older than ``max_age_s``."""
    age = age_s(record, now)
    if age > max_age_s:
        raise CalibrationError(
            f"calibration {record.calibration_id} is {age / 3600:.1f} h old; the limit is "
            f"{max_age_s / 3600:.1f} h. Calibrate again (drift with time and temperature is not in its uncertainty)")


def check_instrument(record: CalibrationRecord, identity: InstrumentIdentity) -> None:
    """Refuse a calibration made on another analyzer (maker, model and serial must agree)."""
    made, now = record.instrument, identity
    if (made.manufacturer, made.model, made.serial) != (now.manufacturer, now.model, now.serial):
        raise CalibrationError(
            f"calibration {record.calibration_id} was made on {made.describe()}, not on {now.describe()}; "
            "calibrate this analyzer")


def _reflection_effect(errors: dict[str, float], terms: dict[str, np.ndarray], direction: str) -> float:
    """Largest error in a corrected reflection (|Γ| <= 1) from errors in one direction's
    terms, by the first-order sensitivities of Γ = X / (e11 X + e10e01), X = Γm - e00:
    |∂Γ/∂e00| = |1 - e11 Γ|² / |e10e01|, |∂Γ/∂e11| = |Γ|², |∂Γ/∂e10e01| = |Γ| |1 - e11 Γ| / |e10e01|."""
    tracking = np.abs(terms[direction + "reflection_tracking"])
    match = 1 + np.abs(terms[direction + "source_match"])
    effect = (errors.get(direction + "directivity", 0.0) * match**2
              + errors.get(direction + "reflection_tracking", 0.0) * match) / tracking
    return float(np.max(effect)) + errors.get(direction + "source_match", 0.0)


def correction_error(errors: dict[str, float], terms: dict[str, np.ndarray]) -> float:
    """Largest error interpolated terms may add to a corrected result: reflection through
    each direction's terms, plus load match (reaches S11 through S21 S12, at most 1) and the
    relative error of transmission tracking."""
    directions = [d for d in ("", "forward.", "reverse.") if d + "reflection_tracking" in terms]
    reflection = max((_reflection_effect(errors, terms, d) for d in directions), default=0.0)
    transmission = 0.0
    for direction in ("forward.", "reverse."):
        added = errors.get(direction + "load_match", 0.0) + errors.get(direction + "isolation", 0.0)
        tracking = terms.get(direction + "transmission_tracking")
        if tracking is not None:
            added += errors.get(direction + "transmission_tracking", 0.0) / float(np.min(np.abs(tracking)))
        transmission = max(transmission, added)
    return reflection + transmission


def fit_to_sweep(
    record: CalibrationRecord,
    frequencies_hz: np.ndarray,
    tolerance: float = DEFAULT_INTERPOLATION_TOLERANCE,
) -> CalibrationRecord:
    """The calibration on exactly the sweep's grid: itself when the grids agree; refused when
    the sweep leaves the calibrated span; interpolated (and flagged) when the estimated error
    that interpolation adds to a corrected result is within ``tolerance``."""
    f = np.asarray(frequencies_hz, dtype=float)
    if same_grid(f, record.frequencies_hz):
        return record
    span = f"{record.frequencies_hz[0] / 1e6:.6g}-{record.frequencies_hz[-1] / 1e6:.6g} MHz"
    if not covers(record.frequencies_hz, f):
        raise CalibrationError(
            f"the sweep ({f[0] / 1e6:.6g}-{f[-1] / 1e6:.6g} MHz) falls outside calibration "
            f"{record.calibration_id} ({span}); a calibration is never extrapolated -- calibrate over the sweep's span")
    names = list(record.terms)
    try:
        moved = resample(record.frequencies_hz, np.stack([record.terms[n] for n in names]), f)
    except ValueError as exc:
        raise CalibrationError(f"calibration {record.calibration_id} cannot be interpolated: {exc}") from exc
    errors = {name: float(e) for name, e in zip(names, moved.estimated_error, strict=True)}
    estimate = correction_error(errors, dict(record.terms))
    if estimate > tolerance:
        raise CalibrationError(
            f"interpolating calibration {record.calibration_id} ({record.frequencies_hz.size} points over {span}) "
            f"onto this sweep would add an estimated error of {estimate:.2g}, above the tolerance {tolerance:g}; "
            "calibrate on this sweep, or with more points")
    residuals = {}
    for name, value in record.residuals.items():
        axes = np.moveaxis(value, 0, -1)
        residuals[name] = np.moveaxis(resample(record.frequencies_hz, axes, f).values, -1, 0)
    return replace(record, frequencies_hz=f, terms=dict(zip(names, moved.values, strict=True)),
                   residuals=residuals, interpolation_error=max(estimate, record.interpolation_error or 0.0))


def prepare(
    record: CalibrationRecord,
    identity: InstrumentIdentity,
    frequencies_hz: np.ndarray,
    max_age_s: float = DEFAULT_MAX_AGE_S,
    tolerance: float = DEFAULT_INTERPOLATION_TOLERANCE,
    now: datetime | None = None,
) -> CalibrationRecord:
    """All the checks before a saved calibration serves a sweep: instrument, age, grid."""
    check_instrument(record, identity)
    check_age(record, max_age_s, now)
    return fit_to_sweep(record, frequencies_hz, tolerance)
