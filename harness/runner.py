"""A run from start to finish, and the resumption of an interrupted one.

A run is recorded in three places that agree: the results database (the authority: a device
is committed when its transaction is), the run folder ``<records>/runs/<run id>/`` (a copy of
the sequence, the journal, one Touchstone file per committed device) and the journal.
:func:`start_run` opens the station, creates the records and carries out the steps;
:func:`resume_run` continues a run that stopped -- Ctrl-C, a halt, a crash, a kill -- without
losing or repeating a device, keeping the calibration only while it is still valid.

Statuses: ``running``, ``complete``, ``interrupted`` (stopped between devices or steps),
``halted`` (a step found the run must not go on, or the batch ended with no device recorded),
``failed`` (an instrument or input error).  Every status but ``complete`` can be resumed.
"""

from __future__ import annotations

import getpass
import os
import re
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from lineproof import __version__, calstore
from lineproof.calibration import same_grid
from lineproof.calkit import load_kit
from lineproof.errors import CalibrationError, InputError, LineproofError, RunHalted
from lineproof.journal import JOURNAL_NAME, RunJournal, read_journal
from lineproof.operators import StopRequested
from lineproof.recording import RecordedDevice, RunFacts, RunFolder
from lineproof.run_checks import CalibrationPolicy, write_suspect_notes
from lineproof.run_steps import RunState, StepRunner, StopSignal
from lineproof.run_view import RunView
from lineproof.sequence import SequenceSpec, check_sequence_text, resolve_path
from lineproof.sequence_methods import TWO_PORT_METHODS, judged_figures
from lineproof.stations import OpenStation, open_station
from lineproof.steps import QualifiedTermination
from lineproof.store import DATABASE_NAME, DEFAULT_RECORDS, ResultStore, open_store, unpack_arrays
from lineproof.touchstone import write_new_file
from lineproof.values import CalibrationRecord, InstrumentIdentity, TerminationQualification, VerificationResult

SEQUENCE_COPY = "sequence.toml"
STATION_COPY = "station.toml"
RUN_ID_PATTERN = re.compile(r"^run-[0-9]{8}T[0-9]{6}Z-[0-9a-f]{6}$")


@dataclass(frozen=True)
class RunOptions:
    records: Path | None = None  # --records: overrides the sequence's [records] folder
    operator: str = ""  # --operator: who runs it (recorded)
    station_file: Path | None = None  # --station: replaces the sequence's [station]


@dataclass
class RunOutcome:
    run_id: str
    status: str
    reason: str | None
    records: Path
    database: Path
    run_folder: Path
    recorded: list[RecordedDevice] = field(default_factory=list)
    counts: dict[str, int] = field(default_factory=dict)
    #: False when ``--resume`` would stop at the same refusal (the reason's fix is the way on).
    resumable: bool = True

    @property
    def exit_code(self) -> int:
        """0 all devices passed, 1 a device failed, was indeterminate or is suspect (a failed
        check put it in doubt), 2 the run did not complete."""
        if self.status != "complete":
            return 2
        counts = self.counts
        return 1 if counts.get("fail", 0) or counts.get("indeterminate", 0) or counts.get("suspect", 0) else 0

    def summary(self) -> dict[str, object]:
        summary: dict[str, object] = {
            "run_id": self.run_id, "status": self.status, "reason": self.reason, "counts": self.counts,
            "exit_code": self.exit_code, "records": str(self.records), "database": str(self.database),
            "run_folder": str(self.run_folder),
        }
        if self.status != "complete" and self.resumable:
            summary["resume_command"] = f"lineproof run --resume {self.run_id} --records {self.records}"
        return summary


def new_run_id() -> str:
    return f"run-{datetime.now(UTC):%Y%m%dT%H%M%SZ}-{os.urandom(3).hex()}"


def check_run_id(run_id: str) -> str:
    if not isinstance(run_id, str) or not RUN_ID_PATTERN.match(run_id):
        raise InputError(f"{run_id[:80]!r} is not a run id", key="run id",
                         fix="give a run id as lineproof printed it, e.g. run-20260101T120000Z-1a2b3c")
    return run_id


def records_location(spec: SequenceSpec | None, option: Path | None) -> tuple[Path, Path]:
    """The records folder and the database file: --records, else the sequence's [records]
    (relative to the sequence's folder), else ./lineproof-records."""
    if option is not None:
        folder = Path(option)
    elif spec is not None and spec.records_folder:
        folder = spec.folder / spec.records_folder
    else:
        folder = DEFAULT_RECORDS
    if folder.exists() and not folder.is_dir():
        raise InputError("the records folder is a file", path=str(folder),
                         fix="give a folder (new or one lineproof wrote to) with --records DIR")
    database = spec.database if spec is not None and spec.database else DATABASE_NAME
    if "://" in database:
        open_store(database)  # refuses a URL this version cannot use, with the reason
    return folder, folder / database


def existing_records(spec: SequenceSpec | None, option: Path | None) -> tuple[Path, Path]:
    """:func:`records_location` of records a run already wrote: InputError (nothing created)
    when the database is not there."""
    folder, database = records_location(spec, option)
    if not database.is_file():
        raise InputError("no results database here", path=str(database),
                         fix="give the records folder the run wrote to with --records DIR")
    return folder, database


def _operator_name(given: str) -> str:
    if given.strip():
        return " ".join(given.split())[:80]
    try:
        return f"{getpass.getuser()} (login name)"
    except (OSError, KeyError):
        return "not given"


LOCK_NAME = "run.lock"


@dataclass
class _HeldLock:
    """The run's lock while this process holds it; ``finished`` (set when the run completes)
    removes the lock file as it is released -- a complete run is never carried out again."""

    path: Path
    finished: bool = False


@contextmanager
def _run_lock(folder: Path) -> Iterator[_HeldLock]:
    """One process per run at a time (POSIX advisory lock, released by the OS if killed).  The
    lock file stays beside a run that can be resumed, and goes when the run completes."""
    folder.mkdir(parents=True, exist_ok=True)
    held = _HeldLock(folder / LOCK_NAME)
    with open(held.path, "a+") as handle:
        try:
            import fcntl
        except ImportError:  # pragma: no cover - Windows: no advisory lock
            yield held
            if held.finished:
                held.path.unlink(missing_ok=True)
            return
        try:
            fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError as exc:
            raise InputError("this run is being carried out by another lineproof process", path=str(folder),
                             fix="wait for it to finish, or stop it first") from exc
        try:
            yield held
        finally:
            if held.finished:
                # Unlinked while still locked: a process that opened it before waits on a file
                # no longer there, and finds the run complete (resume_run checks again, locked).
                held.path.unlink(missing_ok=True)
            fcntl.flock(handle.fileno(), fcntl.LOCK_UN)


def _counts(store: ResultStore, run_id: str) -> dict[str, int]:
    counts = {"total": 0, "pass": 0, "fail": 0, "indeterminate": 0}
    for verdict, number in store.query("SELECT verdict, COUNT(*) FROM devices WHERE run_id = ? GROUP BY verdict",
                                       (run_id,)):
        counts[str(verdict)] = int(number)  # type: ignore[arg-type]
        counts["total"] += int(number)  # type: ignore[arg-type]
    counts["suspect"] = int(store.query("SELECT COUNT(*) FROM devices WHERE run_id = ? AND suspect = 1",  # type: ignore[arg-type]
                                        (run_id,))[0][0])
    return counts


def _facts(spec: SequenceSpec, run_id: str, station: OpenStation, operator: str) -> RunFacts:
    return RunFacts(
        run_id=run_id, software=f"lineproof {__version__}", sequence_name=spec.name,
        sequence_file=Path(spec.source).name, sequence_sha256=spec.sha256, station=station.spec.name,
        operator=operator, analyzer=station.identity, profile=station.profile_name, plan=spec.plan,
        reference_plane=station.spec.reference_plane, decision_rule=spec.decision_rule,
        figures_judged=judged_figures(spec), method_chosen=spec.calibration.chosen if spec.calibration else "",
        as_terminated=spec.measurement.as_terminated if spec.calibration and spec.calibration.method in TWO_PORT_METHODS
        and spec.termination is not None else "",
    )


#: Why a run whose steps all finished is not complete: its batch recorded no device.
NO_DEVICE_MEASURED = "no device measured: the batch ended before any device was recorded"


def _execute(runner: StepRunner, store: ResultStore, journal: RunJournal, outcome: RunOutcome) -> RunOutcome:
    """Carry out the steps; whatever happens, record how the run ended."""
    status, reason = "failed", "stopped by an unexpected error"
    raised: BaseException | None = None
    try:
        completed = runner.run()
        status, reason = ("complete", None) if completed else ("interrupted", runner.stopped_because or "stopped by Ctrl-C")
        if completed and runner.spec.has_step("measure-batch") and _counts(store, outcome.run_id)["total"] == 0:
            # Nothing was proven: not "every device passed" (exit 0).  Resumable, to measure some.
            status, reason = "halted", NO_DEVICE_MEASURED
    except StopRequested as exc:
        status, reason = "interrupted", exc.reason
    except KeyboardInterrupt:
        status, reason = "interrupted", "stopped by Ctrl-C"
    except RunHalted as exc:
        status, reason = "halted", str(exc)
        outcome.resumable = exc.resumable
    except LineproofError as exc:
        status, reason, raised = "failed", str(exc), exc
    except BaseException as exc:
        reason = f"stopped by an unexpected error ({type(exc).__name__}: {exc})"
        raise
    finally:
        outcome.recorded = list(runner.recorded)
        finished = datetime.now(UTC).isoformat(timespec="seconds") if status == "complete" else None
        store.set_run_status(outcome.run_id, status, reason, finished)
        journal.write("stopped", status=status, reason=reason)
    outcome.status, outcome.reason = status, reason
    outcome.counts = _counts(store, outcome.run_id)
    if isinstance(raised, InputError):
        raise raised
    return outcome


def run_kind(spec: SequenceSpec) -> str:
    """What a run does: a batch, or a repeatability study."""
    return "repeatability-study" if spec.has_step("repeatability-study") else "batch"


def _asker(view: RunView, stop: StopSignal) -> Callable[[str], str | None]:
    def ask(prompt: str) -> str | None:
        stop.at_prompt = True
        try:
            return view.ask(prompt)
        finally:
            stop.at_prompt = False

    return ask


def start_run(spec: SequenceSpec, options: RunOptions, view: RunView, stop: StopSignal,
              remeasure_of: str | None = None) -> RunOutcome:
    """A new run of ``spec`` (already checked); ``remeasure_of`` names the run whose suspect
    results this one measures again (its sequence is that run's, its devices those results)."""
    records, database = records_location(spec, options.records)
    operator = _operator_name(options.operator)
    with open_store(database) as store, open_station(spec, _asker(view, stop)) as station:
        run_id = new_run_id()
        folder = RunFolder(records, run_id)
        with _run_lock(folder.path) as lock:
            write_new_file(folder.path, "sequence", ".toml", spec.text, encoding="utf-8")
            if station.spec.source != spec.source:
                station_text = Path(station.spec.source).read_text(encoding="utf-8")
                write_new_file(folder.path, "station", ".toml", station_text, encoding="utf-8")
            planned = len(spec.devices.units) if spec.devices and spec.devices.entry == "listed" else None
            store.start_run({
                "run_id": run_id, "started_utc": datetime.now(UTC).isoformat(timespec="seconds"), "status": "running",
                "sequence_name": spec.name, "station": station.spec.name, "operator": operator,
                "software_version": __version__, "analyzer": station.identity.describe(),
                "resource": station.identity.resource, "sweep_plan": spec.plan.describe(),
                "sequence_file": str(Path(spec.source).resolve()), "sequence_sha256": spec.sha256,
                "station_file": None if station.spec.source == spec.source else str(Path(station.spec.source).resolve()),
                "analyzer_profile": station.profile_name, "decision_rule": spec.decision_rule,
                "reference_plane": station.spec.reference_plane, "run_folder": folder.relative(folder.path, database),
                "planned_devices": planned, "kind": run_kind(spec), "remeasure_of": remeasure_of,
            })
            journal = RunJournal(folder.path)
            try:
                journal.write("run-started", run_id=run_id, sequence=spec.name, sequence_sha256=spec.sha256,
                              operator=operator, records=str(records))
                view.run_started(run_id, spec.name, station.spec.name, planned, resumed=False)
                facts = _facts(spec, run_id, station, operator)
                runner = StepRunner(spec, station, store, journal, folder, facts, view, stop, RunState())
                outcome = RunOutcome(run_id, "running", None, records, database, folder.path)
                outcome = _execute(runner, store, journal, outcome)
                lock.finished = outcome.status == "complete"
                return outcome
            finally:
                journal.close()


# -- resuming -------------------------------------------------------------------------------------


def kept_sequence(folder: RunFolder, row: dict[str, object]) -> SequenceSpec:
    """The sequence the run started with, from the copy in its folder (checked against the hash
    the database holds), anchored at the original file's folder for its relative paths."""
    copy = folder.path / SEQUENCE_COPY
    try:
        text = copy.read_text(encoding="utf-8")
    except OSError as exc:
        raise InputError("the run's copy of its sequence is missing", path=str(copy),
                         fix="restore the run folder from a backup") from exc
    import hashlib

    if hashlib.sha256(text.encode("utf-8")).hexdigest() != row["sequence_sha256"]:
        raise InputError("the run's copy of its sequence differs from the one it started with", path=str(copy),
                         fix="restore the file; a run continues only with the sequence it began")
    station_copy = folder.path / STATION_COPY
    station_text = None
    if station_copy.is_file():
        # Anchored, like the sequence, at the original file's folder for its relative paths.
        station_text = (station_copy.read_text(encoding="utf-8"), str(row.get("station_file") or station_copy))
    return check_sequence_text(text, str(row["sequence_file"]), station_text)


def calibration_problem(cal: CalibrationRecord | None, spec: SequenceSpec, identity: InstrumentIdentity,
                        last_check_passed: bool | None, temperature_c: float | None = None) -> str | None:
    """Why a calibration from before the interruption cannot be kept, or None if it can."""
    if cal is None or spec.calibration is None:
        return "no calibration was finished"
    try:
        calstore.check_instrument(cal, identity)
        calstore.check_age(cal, spec.calibration.valid_for_s)
    except CalibrationError as exc:
        return str(exc)
    moved = CalibrationPolicy(None, spec.calibration.max_temperature_change_k).problem(cal, temperature_c)
    if moved is not None:
        return moved
    plan = spec.plan
    if not same_grid(cal.frequencies_hz, plan.frequencies()) or \
            (cal.plan.if_bandwidth_hz, cal.plan.power_dbm) != (plan.if_bandwidth_hz, plan.power_dbm):
        return "it was made for another sweep"
    path = resolve_path(spec.calibration.kit, spec)
    if path is None or load_kit(path).sha256 != cal.kit_hash:
        return "the cal kit definition has changed since"
    if last_check_passed is False:
        return "its last check-standard verification failed or was out of statistical control"
    return None


def _reused(store: ResultStore, cal: CalibrationRecord, spec: SequenceSpec,
            run_id: str) -> tuple[CalibrationRecord, str | None]:
    """A calibration a resumed run had reused from another run, fitted to its sweep again, and
    where it came from (None: this run made it)."""
    from lineproof.calibration_reuse import ReusedCalibration

    made_in = store.rows("SELECT run_id FROM calibrations WHERE calibration_id = ?", (cal.calibration_id,))
    if not made_in or made_in[0]["run_id"] == run_id:
        return cal, None
    assert spec.calibration is not None
    fitted = calstore.fit_to_sweep(cal, spec.plan.frequencies(), spec.calibration.max_interpolation_error)
    return fitted, ReusedCalibration(fitted, made_in[0]["run_id"], cal.created_utc).describe()


def _kept_qualification(row: dict[str, Any]) -> tuple[QualifiedTermination, int, str]:
    """A qualification from before the interruption, with its trace, as the batch uses it."""
    trace = unpack_arrays(row["trace"])
    qualification = TerminationQualification(row["termination"], row["worst_vswr"], row["worst_frequency_hz"],
                                             row["limit_vswr"], row["expanded_uncertainty"])
    qualified = QualifiedTermination(qualification, trace["frequencies_hz"], trace["reflection"],
                                     trace["standard_uncertainty"], trace["expanded_uncertainty"])
    return qualified, int(row["qualification_id"]), str(row["measured_utc"])


def _restore_state(store: ResultStore, spec: SequenceSpec, run_id: str, row: dict[str, object],
                   identity: InstrumentIdentity, steps_done: set[int],
                   temperature_c: float | None = None) -> tuple[RunState, str | None]:
    state = RunState(steps_done=set(steps_done))
    devices = store.rows("SELECT serial, position FROM devices WHERE run_id = ?", (run_id,))
    state.taken = {str(d["serial"]).lower() for d in devices}
    state.measured = max([int(d["position"] or 0) for d in devices] + [len(devices)])
    cal_id = row.get("calibration_id")
    try:
        cal = store.load_calibration(str(cal_id)) if cal_id else None
    except InputError as exc:
        return state, f"its saved terms cannot be read ({exc.problem})"
    if cal is not None and spec.calibration is not None and spec.calibration.reuse is not None:
        try:  # a calibration of another run, reused: fitted to this sweep again, as the run first did
            cal, state.reused_from = _reused(store, cal, spec, run_id)
        except CalibrationError as exc:
            return state, str(exc)
    checks = store.rows("SELECT * FROM verifications WHERE run_id = ? AND calibration_id = ? ORDER BY verification_id",
                        (run_id, cal_id))
    held = bool(checks[-1]["passed"]) and checks[-1].get("in_control") != 0 if checks else None
    problem = calibration_problem(cal, spec, identity, held, temperature_c)
    if problem is not None:
        return state, problem
    state.calibration, state.reuse_calibration = cal, True
    quals = store.rows("SELECT * FROM qualifications WHERE run_id = ? AND calibration_id = ? AND passed = 1"
                       " ORDER BY qualification_id", (run_id, cal_id))
    if quals and quals[-1]["trace"]:
        state.qualification = _kept_qualification(quals[-1])
    if checks:
        c = checks[-1]
        signals = None if c.get("in_control") is None else tuple(filter(None, (c.get("control_signals") or "").split("; ")))
        result = VerificationResult(c["check_standard"], c["calibration_id"], c["measured_utc"], int(c["devices_before"]),
                                    c["worst_deviation"], c["worst_frequency_hz"], c["tolerance"], (), c.get("en"),
                                    signals, int(c.get("repeats") or 1), c.get("temperature_c"))
        state.last_check = (result, int(c["verification_id"]))
        state.checked_at_devices = result.devices_before
        state.checked_at_utc = datetime.fromisoformat(c["measured_utc"])
    return state, None


def _resumable(store: ResultStore, run_id: str, records: Path) -> tuple[dict[str, Any], RunFolder]:
    """The run's row and folder, or InputError saying why it cannot be resumed."""
    row = store.run(run_id)
    if row is None:
        raise InputError(f"no run {run_id} in this database", path=str(store.path),
                         fix="check the run id (lineproof results lists runs) and --records")
    if row["status"] == "complete":
        raise InputError(f"run {run_id} is complete: there is nothing to resume", path=str(store.path),
                         fix="start a new run with lineproof run SEQUENCE")
    folder = RunFolder(records, run_id)
    if not (folder.path / SEQUENCE_COPY).is_file():
        raise InputError("the run's folder or its copy of the sequence is missing", path=str(folder.path),
                         fix="give the records folder the run wrote to with --records DIR")
    return row, folder


def _tell_resumption(view: RunView, state: RunState, set_aside: list[str], folder: RunFolder, problem: str | None,
                     spec: SequenceSpec) -> None:
    view.note(f"{state.measured} device(s) already recorded; they will not be measured again")
    if set_aside:
        view.note(f"set aside {len(set_aside)} file(s) written but never committed: "
                  f"{', '.join(set_aside)} (in {folder.path / 'uncommitted'})")
    if problem is not None and spec.has_step("calibrate"):
        view.note(f"the calibration cannot be kept ({problem}): calibrating again")


def resume_run(run_id: str, options: RunOptions, view: RunView, stop: StopSignal,
               spec_hint: SequenceSpec | None = None) -> RunOutcome:
    """Continue run ``run_id`` from where it stopped."""
    check_run_id(run_id)
    records, database = existing_records(spec_hint, options.records)
    with open_store(database) as store:
        row, folder = _resumable(store, run_id, records)
        with _run_lock(folder.path) as lock:
            row, folder = _resumable(store, run_id, records)  # again, held: it may have completed meanwhile
            spec = kept_sequence(folder, row)
            if row.get("remeasure_of"):
                from lineproof.remeasure import restricted_to, suspect_units

                spec = restricted_to(spec, suspect_units(store, str(row["remeasure_of"]), spec, skip_done=False))
            journal_state = read_journal(folder.path / JOURNAL_NAME)
            committed = {Path(str(d[0])).name for d in store.query("SELECT touchstone FROM devices WHERE run_id = ?",
                                                                   (run_id,))}
            set_aside = folder.tidy(committed)
            with open_station(spec, _asker(view, stop)) as station:
                temperature = getattr(station.analyzer, "read_temperature", lambda: None)()
                state, problem = _restore_state(store, spec, run_id, row, station.identity, journal_state.steps_done(),
                                                temperature)
                write_suspect_notes(store, folder, run_id)  # a kill may have come between the marks and the notes
                store.set_run_status(run_id, "running")
                journal = RunJournal(folder.path)
                try:
                    journal.write("resumed", attempt=journal_state.count("resumed") + 1, set_aside=set_aside,
                                  calibration_kept=problem is None)
                    view.run_started(run_id, spec.name, station.spec.name, row.get("planned_devices"), resumed=True)
                    _tell_resumption(view, state, set_aside, folder, problem, spec)
                    operator = str(row["operator"])
                    if options.operator.strip():
                        operator = f"{operator}; resumed by {_operator_name(options.operator)}"
                    runner = StepRunner(spec, station, store, journal, folder, _facts(spec, run_id, station, operator),
                                        view, stop, state)
                    outcome = RunOutcome(run_id, "running", None, records, database, folder.path)
                    outcome = _execute(runner, store, journal, outcome)
                    lock.finished = outcome.status == "complete"
                    return outcome
                finally:
                    journal.close()
