"""Verification over time within a run: the check standard measured, judged (En or a fixed
tolerance, then its control chart), recorded with its history; the results a failed check
puts in doubt marked suspect; and the policy that says whether the calibration in use still
holds.

The policy: a calibration holds while (1) it is younger than the sequence's
``valid_for_minutes``, (2) the analyzer's temperature (when its profile can read it) has
moved less than ``max_temperature_change_k`` since it was made, and (3) its last check
passed and was in statistical control.  When it no longer holds, an unattended run calibrates
again (and qualifies the termination and verifies again) before the next device; an attended
one stops at a prompt until the person has the standards ready (:mod:`lineproof.run_steps`).

A check **fails** when the check standard disagrees with its reference (En > 1, or the fixed
tolerance) or a band's point lies beyond its control limits.  A failed check marks every
device of the run measured with that calibration since the last passing check as suspect --
in the database (with the reason and the failed check), in a sidecar file beside each result
file (``<file>.suspect.json``; the Touchstone file itself is never rewritten), in the report
and in the JSON summary.  A run rule or the precision chart only **warns**
(:mod:`lineproof.control_chart`): the check passes and its results stand, but the calibration
no longer holds.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from lineproof import steps
from lineproof.check_history import beyond_limits, combined_signals, history_rows, judge_new_points
from lineproof.errors import InputError
from lineproof.journal import RunJournal
from lineproof.recording import RunFacts, RunFolder
from lineproof.run_view import RunView
from lineproof.sequence import SequenceSpec, resolve_path
from lineproof.store import ResultStore, SuspectWindow
from lineproof.touchstone import write_new_file
from lineproof.values import CalibrationRecord, VerificationResult
from lineproof.verification import (
    EN_CRITERION,
    TOLERANCE_CRITERION,
    CheckReference,
    judge_check,
    measure_check_standard,
    reference_magnitude,
    reference_uncertainty,
)

SIDECAR_SUFFIX = ".suspect.json"


@dataclass(frozen=True)
class CalibrationPolicy:
    """When a calibration stops holding (see the module docstring)."""

    max_age_s: float | None = None
    max_temperature_change_k: float | None = None

    @classmethod
    def of(cls, spec: SequenceSpec) -> CalibrationPolicy:
        cal = spec.calibration
        if cal is None:
            return cls()
        return cls(cal.valid_for_s, cal.max_temperature_change_k)

    def problem(self, cal: CalibrationRecord, temperature_c: float | None,
                last_check: VerificationResult | None = None, now: datetime | None = None) -> str | None:
        """Why ``cal`` no longer holds, or None while it does."""
        moment = now or datetime.now(UTC)
        age = (moment - datetime.fromisoformat(cal.created_utc)).total_seconds()
        if self.max_age_s is not None and age > self.max_age_s:
            return f"it is {age / 60:.1f} min old, beyond the {self.max_age_s / 60:g} min it is valid for"
        if (self.max_temperature_change_k is not None and temperature_c is not None
                and cal.temperature_c is not None
                and abs(temperature_c - cal.temperature_c) > self.max_temperature_change_k):
            return (f"the analyzer's temperature moved from {cal.temperature_c:.2f} to {temperature_c:.2f} °C, "
                    f"more than the {self.max_temperature_change_k:g} K it holds for")
        return None if last_check is None else check_problem(last_check)


#: Checks in a row out of statistical control -- each followed by a new calibration -- that halt
#: a run (our choice, no published source).  A warning now and then is the charts' false-alarm
#: rate (the precision chart alone: 1 % per band and check); three in a row, each with a fresh
#: calibration, is the process itself (a worn connector, a damaged standard).
WARNINGS_BEFORE_HALT = 3


def halt_reason(result: VerificationResult, first_of_calibration: bool, warnings_in_a_row: int) -> str | None:
    """Why the run must stop after ``result`` (None: it goes on).  ``warnings_in_a_row``: the
    checks in a row, this one included, that passed out of statistical control."""
    if first_of_calibration and not result.passed:
        return (f"check standard {result.check_standard} failed verification after {result.devices_before} "
                f"device(s): {failure_reason(result)}. The calibration does not hold; results since the last "
                "passing check are in doubt. Check the connections and the standards and resume the run: it will "
                "calibrate again")
    if result.passed and not result.in_control and warnings_in_a_row >= WARNINGS_BEFORE_HALT:
        return (f"check standard {result.check_standard} is out of statistical control again, {warnings_in_a_row} "
                f"checks in a row with a new calibration before each ({failure_reason(result)}): the measurement "
                "process, not one calibration, has changed. Look at the check standard, the calibration standards "
                "and the connectors, then resume the run: it will calibrate again")
    return None


def check_problem(result: VerificationResult) -> str | None:
    """Why the calibration a check was made with no longer holds after it, or None: the check
    failed (En > 1, or a point beyond the control limits), or the chart warned (a run rule, the
    precision chart) -- the calibration is made again, but no result is put in doubt."""
    if not result.passed:
        return f"its last check failed ({failure_reason(result)})"
    if not result.in_control:
        return f"its last check was out of statistical control ({'; '.join(result.control_signals or ())})"
    return None


def failure_reason(result: VerificationResult) -> str:
    """Why a check failed, in a sentence."""
    reasons = []
    if not result.agrees:
        if result.en is not None:
            worst = max(result.bands, key=lambda b: b.en or 0.0)
            reasons.append(f"En {result.en:.2f} > 1 in band {worst.name}: |Γ| {worst.measured_reflection:.4f} against "
                           f"{worst.reference_reflection:.4f} +- {worst.tolerance:.4f}")
        else:
            reasons.append(f"|Γ| off its reference by {result.sweep_worst_deviation:.4f} at "
                           f"{result.sweep_worst_frequency_hz / 1e6:.3f} MHz (tolerance {result.tolerance:.4f})")
    if result.control_signals:
        reasons.append(f"out of statistical control: {'; '.join(result.control_signals)}")
    return "; ".join(reasons) or "passed"


@dataclass(frozen=True)
class RecordedCheck:
    result: VerificationResult
    row: int
    suspects: tuple[str, ...]  # serials this check made suspect


class CheckRunner:
    """Measures, judges and records the sequence's check standard on one open station."""

    def __init__(self, spec: SequenceSpec, store: ResultStore, journal: RunJournal, folder: RunFolder,
                 facts: RunFacts, view: RunView, measuring: steps.Station) -> None:
        self.spec = spec
        self.store = store
        self.journal = journal
        self.folder = folder
        self.facts = facts
        self.view = view
        self.measuring = measuring
        self._reference: CheckReference | None = None

    @property
    def analyzer_name(self) -> str:
        return self.facts.analyzer.describe()

    def read_temperature(self) -> float | None:
        """The analyzer's temperature, when its profile says how to read it."""
        read = getattr(self.measuring.analyzer, "read_temperature", None)
        return None if read is None else read()

    def reference(self) -> CheckReference:
        if self._reference is None:
            check = self.spec.check_standard
            assert check is not None
            path = None
            if check.reference_file:
                path = resolve_path(check.reference_file, self.spec)
                if path is None:
                    raise InputError("check standard reference file not found", path=check.reference_file,
                                     key="check_standard.reference_file")
            f = self.spec.plan.frequencies()
            magnitude = reference_magnitude(f, path, check.reference_vswr, check.model)
            spread = None if check.reference_uncertainty is None else reference_uncertainty(f, check.reference_uncertainty)
            self._reference = CheckReference(magnitude, spread)
        return self._reference

    def check(self, cal: CalibrationRecord, devices_before: int, last_pass: VerificationResult | None,
              drain: Callable[[], None]) -> RecordedCheck:
        """Measure the check standard with ``cal`` (after ``devices_before`` devices of the run)
        and record it; a failed check marks the devices since ``last_pass`` suspect.  ``drain``
        finishes the recordings still running before anything is marked.  The check is recorded
        at the analyzer's temperature before its sweeps (the conditions it set out to prove); the
        journal has the temperature after them too."""
        check = self.spec.check_standard
        assert check is not None
        self.view.step_started(f"verifying with check standard {check.name}", total=check.repeats)
        temperature = self.read_temperature()
        reading = measure_check_standard(self.measuring, cal, check.name, check.repeats)
        temperature_after = self.read_temperature() if temperature is not None else None
        result, points = judge_check(check.name, cal.calibration_id, reading, self.reference(), check.tolerance,
                                     self.spec.bands, devices_before)
        station, analyzer = self.facts.station, self.analyzer_name
        said = judge_new_points(self.store, station, analyzer, check.name, points, check.baseline_checks,
                                result.agrees)
        result = replace(result, control_signals=combined_signals(said), beyond_limits=beyond_limits(said),
                         temperature_c=temperature)
        drain()  # recorded during the check's sweeps: the lines stay in order, the marks see every device
        window = None
        after = last_pass.devices_before if last_pass is not None and last_pass.calibration_id == cal.calibration_id else 0
        if not result.passed and devices_before > after:
            window = SuspectWindow(cal.calibration_id, after, devices_before,
                                   f"check standard {check.name} failed after device {devices_before}: "
                                   f"{failure_reason(result)}")
        criterion = EN_CRITERION if check.criterion == "En" else TOLERANCE_CRITERION
        row = self.store.record_verification(self.facts.run_id, result, station, analyzer, criterion,
                                             history_rows(result, points, said, station, analyzer), window)
        suspects: tuple[str, ...] = ()
        if window is not None:
            suspects = tuple(str(r[0]) for r in self.store.query(
                "SELECT serial FROM devices WHERE suspect_verification_id = ? ORDER BY position", (row,)))
            write_suspect_notes(self.store, self.folder, self.facts.run_id)
        self.journal.write("verified", verification_id=row, passed=result.passed, in_control=result.in_control,
                           devices_before=devices_before, suspect=list(suspects), temperature_before_c=temperature,
                           temperature_after_c=temperature_after)
        self.view.step_finished("")
        self.view.verification(result, reused=False)
        if suspects and window is not None:
            self.view.suspect_results(list(suspects), window.reason,
                                      f"lineproof run --remeasure-suspect {self.facts.run_id}")
        return RecordedCheck(result, row, suspects)


def _sidecar_text(row: dict[str, Any], run_id: str) -> str:
    note = {
        "lineproof": "suspect result", "run_id": run_id, "serial": row["serial"], "position": row["position"],
        "file": Path(str(row["touchstone"])).name, "file_sha256": row["file_sha256"],
        "reason": row["suspect_reason"], "failed_verification_id": row["suspect_verification_id"],
        "marked_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "remeasure": f"lineproof run --remeasure-suspect {run_id}",
    }
    return json.dumps(note, indent=2, ensure_ascii=False) + "\n"


def write_suspect_notes(store: ResultStore, folder: RunFolder, run_id: str) -> list[str]:
    """A sidecar note beside each suspect result file of the run that has none yet (the
    result file itself is never touched); returns the serials noted now."""
    noted = []
    for row in store.rows("SELECT * FROM devices WHERE run_id = ? AND suspect = 1 ORDER BY position", (run_id,)):
        name = Path(str(row["touchstone"])).name
        if (folder.path / f"{name}{SIDECAR_SUFFIX}").exists():
            continue
        write_new_file(folder.path, f"{name}.suspect", ".json", _sidecar_text(row, run_id), encoding="utf-8")
        noted.append(str(row["serial"]))
    return noted
