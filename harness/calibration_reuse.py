"""A calibration from the records, reloaded for a later run (``[calibration] reuse``).

The calibrate step of a sequence with ``reuse = "latest"`` (or a calibration id) loads a stored
calibration instead of measuring the standards -- only when it is fit to serve:

- made at the same station and on the same analyzer (maker, model and serial);
- by the method the sequence uses, with the same cal-kit definition (SHA-256 of the kit file);
- younger than ``valid_for_minutes``, at an analyzer temperature within
  ``max_temperature_change_k`` of now (when the profile reads it), its last check neither failed nor warned (out of statistical control);
- at the same IF bandwidth and source power, over a span that covers the sweep: on another grid
  its terms are interpolated (:func:`lineproof.calstore.fit_to_sweep`) only when the
  interpolation's own error estimate stays within ``max_interpolation_error``, and the record
  then carries that estimate, which enters every uncertainty.

Anything else is refused with the reason and how to calibrate anew.  "latest" is the newest
calibration of this station, analyzer and method: an older one is never taken in its place
(it is older still).  The steps after it -- qualifying the termination, verifying with the
check standard -- run as the sequence lists them.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from lineproof import calstore
from lineproof.calibration import METHOD_NAMES
from lineproof.calkit import load_kit
from lineproof.errors import CalibrationError, InputError
from lineproof.run_checks import CalibrationPolicy
from lineproof.sequence import SequenceSpec, resolve_path
from lineproof.store import ResultStore
from lineproof.values import CalibrationRecord, InstrumentIdentity


class ReuseRefused(CalibrationError):
    """A stored calibration cannot serve this run; the message says why and what to do."""


@dataclass(frozen=True, eq=False)
class ReusedCalibration:
    """A stored calibration fitted to this run's sweep, and where it came from."""

    calibration: CalibrationRecord
    run_id: str | None
    created_utc: str

    def describe(self) -> str:
        made = f"made in run {self.run_id}" if self.run_id else "made outside a run"
        interpolated = self.calibration.interpolation_error
        fitted = "on this sweep's grid" if interpolated is None else \
            f"interpolated onto this sweep (estimated error {interpolated:.2g})"
        return f"{self.calibration.calibration_id}, {made} at {self.created_utc}, {fitted}"


def _how_to_calibrate_anew(spec: SequenceSpec) -> str:
    line = spec_line(spec, "calibration.reuse")
    where = f"{spec.source}{f':{line}' if line else ''}"
    return (f"remove reuse from [calibration] ({where}) and run again: the calibrate step then measures the kit's "
            "standards")


def spec_line(spec: SequenceSpec, key: str) -> int | None:
    from lineproof.toml_problems import KeyLines

    return KeyLines(spec.text).line_of(key)


def _refuse(spec: SequenceSpec, why: str) -> ReuseRefused:
    return ReuseRefused(f"[calibration] reuse = {spec.calibration.reuse!r}: {why}. Fix: "  # type: ignore[union-attr]
                        f"{_how_to_calibrate_anew(spec)}")


def _row(store: ResultStore, spec: SequenceSpec, station: str, identity: InstrumentIdentity,
         method: str) -> dict[str, Any]:
    """The calibrations row the sequence names (an id) or the newest of this station, analyzer
    and method ("latest")."""
    wanted = spec.calibration.reuse  # type: ignore[union-attr]
    if wanted != "latest":
        rows = store.rows("SELECT * FROM calibrations WHERE calibration_id = ?", (wanted,))
        if not rows:
            raise _refuse(spec, f"the records ({store.path}) hold no calibration {wanted}")
        return rows[0]
    rows = store.rows("SELECT * FROM calibrations WHERE station = ? AND analyzer_manufacturer = ? AND"
                      " analyzer_model = ? AND analyzer_serial = ? AND method = ? ORDER BY created_utc DESC,"
                      " calibration_id DESC LIMIT 1",
                      (station, identity.manufacturer, identity.model, identity.serial, method))
    if rows:
        return rows[0]
    others = store.rows("SELECT calibration_id, analyzer, method FROM calibrations WHERE station = ?"
                        " ORDER BY created_utc DESC LIMIT 1", (station,))
    seen = f"; the latest at this station, {others[0]['calibration_id']}, is a {others[0]['method']} calibration " \
           f"of {others[0]['analyzer']}" if others else ""
    raise _refuse(spec, f"the records ({store.path}) hold no {method} calibration of {identity.describe()} at "
                  f"station {station!r}{seen}")


def reuse_calibration(store: ResultStore, spec: SequenceSpec, station: str, identity: InstrumentIdentity,
                      temperature_c: float | None = None) -> ReusedCalibration:
    """The stored calibration the sequence asks for, fitted to its sweep; ReuseRefused when
    it cannot serve (see the module docstring)."""
    cal_spec = spec.calibration
    assert cal_spec is not None and cal_spec.reuse is not None
    method = METHOD_NAMES.get(cal_spec.method, cal_spec.method)
    row = _row(store, spec, station, identity, method)
    name = row["calibration_id"]
    if row["station"] != station:
        raise _refuse(spec, f"calibration {name} was made at station {row['station']!r}, not {station!r}")
    try:
        record = store.load_calibration(name)
    except InputError as exc:
        raise _refuse(spec, f"its saved terms cannot be read ({exc.problem})") from exc
    assert record is not None
    try:
        calstore.check_instrument(record, identity)
    except CalibrationError as exc:
        raise _refuse(spec, str(exc).split("; calibrate")[0]) from exc
    _check_fit(spec, record, method, temperature_c, store)
    try:
        fitted = calstore.fit_to_sweep(record, spec.plan.frequencies(), cal_spec.max_interpolation_error)
    except CalibrationError as exc:
        why = str(exc).split("; ")[0]
        if "above the tolerance" in why:
            why += " (max_interpolation_error; raise it only if an error that large is acceptable)"
        raise _refuse(spec, why) from exc
    return ReusedCalibration(fitted, row.get("run_id"), record.created_utc)


def _check_fit(spec: SequenceSpec, record: CalibrationRecord, method: str, temperature_c: float | None,
               store: ResultStore) -> None:
    cal_spec = spec.calibration
    assert cal_spec is not None
    name = record.calibration_id
    if record.method != method:
        raise _refuse(spec, f"calibration {name} is a {record.method} calibration; this sequence uses {method}")
    path = resolve_path(cal_spec.kit, spec)
    if path is None or load_kit(path).sha256 != record.kit_hash:
        raise _refuse(spec, f"calibration {name} was made with another definition of the cal kit ({record.kit_name}, "
                      f"SHA-256 {record.kit_hash[:12]}...) than {cal_spec.kit}")
    too_old = CalibrationPolicy(cal_spec.valid_for_s, cal_spec.max_temperature_change_k).problem(record, temperature_c)
    if too_old is not None:
        raise _refuse(spec, f"calibration {name} no longer holds: {too_old}")
    plan, made = spec.plan, record.plan
    if (plan.if_bandwidth_hz, plan.power_dbm) != (made.if_bandwidth_hz, made.power_dbm):
        raise _refuse(spec, f"calibration {name} was made at IF bandwidth {made.if_bandwidth_hz:g} Hz and source power "
                      f"{made.power_dbm if made.power_dbm is not None else 'as the instrument chose'}, and this sweep "
                      "asks for others (the raw terms change with them)")
    checks = store.rows("SELECT passed, in_control, measured_utc FROM verifications WHERE calibration_id = ?"
                        " ORDER BY verification_id DESC LIMIT 1", (name,))
    if checks and not checks[0]["passed"]:
        raise _refuse(spec, f"the last check of calibration {name} ({checks[0]['measured_utc']}) failed")
    if checks and checks[0]["in_control"] == 0:  # a warning: the chart says this calibration no longer holds
        raise _refuse(spec, f"the last check of calibration {name} ({checks[0]['measured_utc']}) found the check "
                      "standard out of statistical control")
