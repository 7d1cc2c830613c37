"""The steps of a run, in the order a sequence lists them, with the batch's re-verification.

Each step calls :mod:`lineproof.steps` (calibrate, qualify, measure) and
:mod:`lineproof.verification` through the analyzer and operator interfaces, records what it
did, and tells the view.  In an unattended batch the recording of one device (correction,
judging, Touchstone file, database rows, journal line) runs on a worker thread while the next
device is routed and swept, so the analyzer is never idle waiting for the disk.
"""

from __future__ import annotations

import dataclasses
import threading
import time
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from datetime import UTC, datetime

from lineproof import calibration, steps
from lineproof.calkit import load_kit
from lineproof.errors import InputError, RunHalted
from lineproof.interfaces import Operator
from lineproof.journal import RunJournal
from lineproof.operators import ConsoleOperator
from lineproof.recording import MeasurementBasis, RecordedDevice, RunFacts, RunFolder, record_device
from lineproof.run_checks import CalibrationPolicy, CheckRunner, check_problem, halt_reason
from lineproof.run_devices import Acquired, AsTerminatedDevices, TransmissionDevices, TwoPortDevices
from lineproof.run_view import RunView
from lineproof.sequence import DeviceUnit, SequenceSpec, StepSpec, resolve_path
from lineproof.sequence_methods import judged_figures, needs_termination
from lineproof.stations import OpenStation
from lineproof.steps import QualifiedTermination
from lineproof.store import ResultStore
from lineproof.values import CalibrationRecord, DeviceIdentity, VerificationResult


class StopSignal:
    """Set by Ctrl-C (or a stop typed at a prompt); the run stops between devices, or before
    the next step that measures or needs a person (see :meth:`StepRunner.run`)."""

    def __init__(self) -> None:
        self.requested = False
        self.at_prompt = False


@dataclass
class RunState:
    """Where the run stands; filled from the database and journal when it resumes."""

    calibration: CalibrationRecord | None = None
    qualification: tuple[QualifiedTermination, int, str] | None = None  # result, row id, UTC
    last_check: tuple[VerificationResult, int] | None = None  # the last *passing* check and its id
    reuse_calibration: bool = False
    steps_done: set[int] = field(default_factory=set)
    measured: int = 0  # devices acquired in this run (all sessions)
    taken: set[str] = field(default_factory=set)  # serials committed in this run, lower case
    checked_at_devices: int = 0
    checked_at_utc: datetime = field(default_factory=lambda: datetime.now(UTC))
    #: Why the calibration in use no longer holds (a failed check), until it is made again.
    calibration_doubt: str | None = None
    #: Where the calibration in use came from when the sequence reused a stored one.
    reused_from: str | None = None
    #: Checks in a row that passed out of statistical control (a warning each).
    warnings_in_a_row: int = 0


class _ProgressOperator:
    """Passes connections through to the real operator and advances the step's progress;
    ``after_connect`` (when set) runs once each connection is made."""

    def __init__(self, inner: Operator, view: RunView) -> None:
        self.inner = inner
        self.view = view
        self.after_connect: Callable[[], None] | None = None

    def connect(self, port: int, thing: str, output: str | None, instruction: str, reversed: bool = False) -> None:
        if reversed:
            self.inner.connect(port, thing, output, instruction, reversed=True)
        else:
            self.inner.connect(port, thing, output, instruction)
        self.view.step_advanced(instruction)
        if self.after_connect is not None:
            self.after_connect()


#: Steps that measure: a stop request ends the run before them, and before a step that waits
#: for a person (a message or a route on an attended station).  The others (identify; route and
#: message on an unattended station) finish a run in moments.
MEASURING_ACTIONS = frozenset({"calibrate", "qualify-termination", "verify", "measure-batch", "repeatability-study"})


def stop_comes_before(action: str, attended: bool) -> bool:
    """Whether a stop request ends the run before a step doing ``action`` (see
    :data:`MEASURING_ACTIONS`); ``attended``: a person makes the connections."""
    return action in MEASURING_ACTIONS or (attended and action in ("message", "route"))

#: How long a recording waits after the next connection before it starts (see ``_after_trigger``).
_TRIGGER_HEAD_START_S = 0.001


class _RecordingPipeline:
    """Records one device while the next is swept.

    A device's recording is handed over when it has been measured, and started when the next
    connection is made -- that is, just before the next sweep, when the main thread is about to
    wait for the analyzer and does not compete for the interpreter.  ``overlap=False`` records
    each device at once, in the calling thread (attended runs: the line shows before the prompt).
    """

    def __init__(self, overlap: bool) -> None:
        self._executor = ThreadPoolExecutor(1, thread_name_prefix="lineproof-record") if overlap else None
        self._waiting: Callable[[], None] | None = None
        self._pending: Future[None] | None = None

    def submit(self, work: Callable[[], None]) -> None:
        if self._executor is None:
            work()
            return
        self.drain()
        self._waiting = work

    def start(self) -> None:
        """Start the waiting recording (called once the next connection is made)."""
        waiting, self._waiting = self._waiting, None
        if waiting is not None and self._executor is not None:
            self._pending = self._executor.submit(self._after_trigger, waiting)

    @staticmethod
    def _after_trigger(work: Callable[[], None]) -> None:
        # Let the main thread trigger the sweep first: recording is mostly Python and would hold
        # the interpreter for up to its switch interval (5 ms) while the sweep waits to start.
        time.sleep(_TRIGGER_HEAD_START_S)
        work()

    def drain(self) -> None:
        """Wait until every recording handed over is done (and raise what it raised)."""
        self.start()
        pending, self._pending = self._pending, None
        if pending is not None:
            pending.result()

    def close(self) -> None:
        try:
            self.drain()
        finally:
            if self._executor is not None:
                self._executor.shutdown(wait=True)


class StepRunner:
    """Carries out a sequence's steps on an open station, recording as it goes."""

    def __init__(self, spec: SequenceSpec, station: OpenStation, store: ResultStore, journal: RunJournal,
                 folder: RunFolder, facts: RunFacts, view: RunView, stop: StopSignal, state: RunState) -> None:
        self.spec = spec
        self.station = station
        self.store = store
        self.journal = journal
        self.folder = folder
        self.facts = facts
        self.view = view
        self.stop = stop
        self.state = state
        self.recorded: list[RecordedDevice] = []
        #: Why a stop request ended the run before its last step (None: it did not).
        self.stopped_because: str | None = None
        self._record_lock = threading.Lock()
        self._pipeline: _RecordingPipeline | None = None
        self._devices: AsTerminatedDevices | TwoPortDevices | TransmissionDevices | None = None  # set by the batch
        self._batch_ended = False  # the person ended a scanned batch
        self.measuring = steps.Station(station.analyzer, _ProgressOperator(station.operator, view),  # type: ignore[arg-type]
                                       station.identity, spec.plan, station.spec.analyzer.port,
                                       station.spec.uncertainty)
        self.checks = CheckRunner(spec, store, journal, folder, facts, view, self.measuring)
        self.policy = CalibrationPolicy.of(spec)

    def run(self) -> bool:
        """Every step in order: True when all were carried out, False when a stop request ended
        the run first (``stopped_because`` says where).  A stop request that comes when nothing
        is left to measure -- the batch recorded, its final check made -- lets the steps that
        measure nothing finish and the run complete.  Raises RunHalted when a step finds the
        run must not go on."""
        self.station.analyzer.configure(self.spec.plan)
        self.view.note(f"analyzer: {self.station.identity.describe()} at {self.station.identity.resource}")
        self.view.note(f"sweep: {self.spec.plan.describe()}")
        handlers: dict[str, Callable[[int, StepSpec], None]] = {
            "identify": self._identify, "calibrate": self._calibrate, "qualify-termination": self._qualify,
            "verify": self._verify_step, "measure-batch": self._batch, "message": self._message, "route": self._route,
            "repeatability-study": self._study,
        }
        for index, step in enumerate(self.spec.steps):
            if self.stop.requested and self._stops_before(index):
                return False
            handlers[step.action](index, step)
            if self.stopped_because is not None:  # the batch, cut short
                return False
            self.state.steps_done.add(index)
            self.journal.write("step-done", index=index, action=step.action)
        if self.stop.requested:
            self.view.note("Ctrl-C came when nothing was left to measure: the run is complete")
        return True

    def _stops_before(self, index: int) -> bool:
        """Whether a stop request ends the run before step ``index`` (setting why)."""
        attended = isinstance(self.station.operator, ConsoleOperator)
        left = [step.action for step in self.spec.steps[index:] if stop_comes_before(step.action, attended)]
        if not left:
            return False
        step = self.spec.steps[index]
        batch_done = any(s.action == "measure-batch" and i in self.state.steps_done
                         for i, s in enumerate(self.spec.steps))
        self.stopped_because = (f"stopped by Ctrl-C before step {index + 1} ({step.action})"
                                + ("; every device of the batch is recorded" if batch_done else "")
                                + f"; still to do: {', '.join(left)}")
        return True

    # -- simple steps ---------------------------------------------------------------------------

    def _identify(self, index: int, step: StepSpec) -> None:
        self.view.step_started("identifying the analyzer", total=1)
        now = self.station.analyzer.identify()
        before = self.station.identity
        if (now.manufacturer, now.model, now.serial) != (before.manufacturer, before.model, before.serial):
            raise RunHalted(f"the analyzer now answering is {now.describe()}, not {before.describe()}; "
                            "reconnect the analyzer the run started with")
        self.view.step_finished(f"identified: {now.describe()}")

    def _message(self, index: int, step: StepSpec) -> None:
        if index in self.state.steps_done:
            return
        operator = self.station.operator
        if isinstance(operator, ConsoleOperator):
            operator.acknowledge(step.text)
        else:
            self.view.note(f"message: {step.text}")

    def _route(self, index: int, step: StepSpec) -> None:
        assert step.target is not None
        self.view.step_started(f"routing to {step.target}", total=1)
        self.measuring.operator.connect(self.measuring.port, step.target, None, f"Connect {step.target} to port "
                                      f"{self.measuring.port}")
        self.view.step_finished(f"routed to {step.target}")

    # -- calibration, qualification, verification -------------------------------------------------

    def _calibrate(self, index: int, step: StepSpec) -> None:
        state = self.state
        if state.reuse_calibration and state.calibration is not None:
            self.view.step_started(f"keeping calibration {state.calibration.calibration_id}", total=1)
            self.journal.write("calibrated", calibration_id=state.calibration.calibration_id, reused=True)
            self.view.step_finished(f"calibration {state.calibration.calibration_id} kept: still valid")
            return
        cal_spec = self.spec.calibration
        assert cal_spec is not None
        if cal_spec.reuse is not None and index >= 0:  # the sequence's step; made again when it stops holding
            self._reuse()
            return
        path = resolve_path(cal_spec.kit, self.spec)
        if path is None:
            raise InputError("cal kit file not found", path=cal_spec.kit, key="calibration.kit")
        kit = load_kit(path)
        if cal_spec.chosen:
            self.view.note(f"calibration method: {cal_spec.method}, chosen by lineproof as {cal_spec.chosen}")
        connections = {"one-port": 3, "one-path": 4, "solt": 7, "thru-response": 1}.get(cal_spec.method, 3)
        self.view.step_started(f"calibrating ({cal_spec.method}, kit {kit.name})", total=connections)
        temperature = self.checks.read_temperature()
        cal = dataclasses.replace(steps.calibrate(self.measuring, kit, cal_spec.method), temperature_c=temperature)
        self.store.save_calibration(self.facts.run_id, cal, self.facts.station)
        self.journal.write("calibrated", calibration_id=cal.calibration_id, reused=False)
        state.calibration, state.qualification, state.last_check = cal, None, None
        state.reuse_calibration, state.calibration_doubt, state.reused_from = False, None, None
        self.view.step_finished(f"calibrated: {cal.method}, kit {kit.name} -> {cal.calibration_id}")

    def _reuse(self) -> None:
        """Load the stored calibration the sequence names (:mod:`lineproof.calibration_reuse`);
        the steps after it -- qualification, verification -- run as listed."""
        from lineproof.calibration_reuse import ReuseRefused, reuse_calibration

        state = self.state
        try:
            reused = reuse_calibration(self.store, self.spec, self.facts.station, self.station.identity,
                                       self.checks.read_temperature())
        except ReuseRefused as exc:
            raise RunHalted(str(exc), resumable=False) from exc  # a resume would load the same one
        self.store.update_run(self.facts.run_id, {"calibration_id": reused.calibration.calibration_id,
                                                  "calibration_method": reused.calibration.method,
                                                  "cal_kit": reused.calibration.kit_name})
        self.journal.write("calibrated", calibration_id=reused.calibration.calibration_id, reused=True,
                           reused_from_run=reused.run_id, interpolation_error=reused.calibration.interpolation_error)
        state.calibration, state.qualification, state.last_check = reused.calibration, None, None
        state.reuse_calibration, state.calibration_doubt, state.reused_from = False, None, reused.describe()
        self.view.step_finished(f"calibration reused: {reused.describe()}")

    def _qualify(self, index: int, step: StepSpec) -> None:
        state, termination = self.state, self.spec.termination
        assert termination is not None and state.calibration is not None
        if state.reuse_calibration and state.qualification is not None:
            self.view.qualification(state.qualification[0].qualification, reused=True)
            return
        self.view.step_started(f"qualifying termination {termination.name}", total=1)
        qualified = steps.measure_termination(self.measuring, state.calibration, termination.name, termination.max_vswr)
        measured_utc = datetime.now(UTC).isoformat(timespec="seconds")
        trace = {"frequencies_hz": qualified.frequencies_hz, "reflection": qualified.reflection,
                 "standard_uncertainty": qualified.standard_uncertainty,
                 "expanded_uncertainty": qualified.expanded_uncertainty}
        row = self.store.record_qualification(self.facts.run_id, state.calibration.calibration_id,
                                              qualified.qualification, measured_utc, trace)
        self.journal.write("qualified", qualification_id=row, passed=qualified.qualification.passed)
        state.qualification = (qualified, row, measured_utc)
        self.view.step_finished("")
        self.view.qualification(qualified.qualification, reused=False)

    def _verify_step(self, index: int, step: StepSpec) -> None:
        if self.state.reuse_calibration and self.state.last_check is not None:
            self.view.verification(self.state.last_check[0], reused=True)
            return
        self.verify()

    def verify(self) -> None:
        """Measure the check standard with the calibration in use (:mod:`lineproof.run_checks`).
        A failed first check of a calibration halts the run; a later one leaves the
        calibration in doubt (the results since the last passing check are marked suspect),
        and it is made again before the next device.  A check that passes out of statistical
        control (a warning) has the calibration made again too; the run halts when the first
        checks of two new calibrations in a row warn again: then it is not the calibration
        (:func:`lineproof.run_checks.halt_reason`)."""
        state = self.state
        assert self.spec.check_standard is not None and state.calibration is not None
        last = state.last_check[0] if state.last_check else None
        recorded = self.checks.check(state.calibration, state.measured, last, self._drain)
        state.checked_at_devices, state.checked_at_utc = state.measured, datetime.now(UTC)
        result = recorded.result
        if result.passed:
            state.last_check = (result, recorded.row)
            state.warnings_in_a_row = 0 if result.in_control else state.warnings_in_a_row + 1
        halt = halt_reason(result, last is None, state.warnings_in_a_row)
        if halt is not None:
            raise RunHalted(halt)
        problem = check_problem(result)
        if problem is not None:
            state.calibration_doubt = problem

    def _drain(self) -> None:
        if self._pipeline is not None:
            self._pipeline.drain()

    def _keep_calibration_valid(self) -> None:
        """Before a device: calibrate again if the calibration no longer holds (the policy of
        :mod:`lineproof.run_checks`); an attended run first stops at a prompt."""
        state = self.state
        assert state.calibration is not None
        problem = state.calibration_doubt or self.policy.problem(state.calibration, self.checks.read_temperature())
        if problem is None:
            return
        self._drain()  # the lines of the devices measured so far come first
        self.view.note(f"the calibration no longer holds: {problem}")
        self.journal.write("calibration-no-longer-holds", reason=problem)
        operator = self.station.operator
        if isinstance(operator, ConsoleOperator):
            operator.acknowledge(f"The calibration no longer holds ({problem}). Have the calibration standards "
                                 "ready: it is made again now")
        self._calibrate(-1, StepSpec("calibrate"))
        if state.calibration is not None and state.calibration.method == calibration.THRU_RESPONSE_METHOD:
            return  # transmission only: nothing to qualify or verify with it
        if self.spec.termination is not None:
            self._qualify(-1, StepSpec("qualify-termination"))
        if self.spec.check_standard is not None:
            self.verify()

    def _check_due(self) -> bool:
        reverify, state = self.spec.reverify, self.state
        since = state.measured - state.checked_at_devices
        if reverify.every_devices is not None and since >= reverify.every_devices:
            return True
        minutes = (datetime.now(UTC) - state.checked_at_utc).total_seconds() / 60.0
        return reverify.every_minutes is not None and since > 0 and minutes >= reverify.every_minutes

    # -- the batch ----------------------------------------------------------------------------------

    def _basis(self) -> MeasurementBasis:
        state = self.state
        if state.calibration is None or (state.qualification is None and needs_termination(self.spec)):
            raise RunHalted("the batch needs a calibration and a qualified termination first")
        check = state.last_check
        if state.qualification is None:  # transmission judged alone: the device's output is on port 2
            return MeasurementBasis(state.calibration, None, None, None, check[0] if check else None,
                                    check[1] if check else None, reused_from=state.reused_from)
        qualified, row, measured_utc = state.qualification
        return MeasurementBasis(state.calibration, qualified.qualification, row, measured_utc,
                                check[0] if check else None, check[1] if check else None, qualified,
                                state.reused_from)

    def _device_measurement(self) -> AsTerminatedDevices | TwoPortDevices | TransmissionDevices:
        """How the batch measures each device: as the calibration in use allows."""
        cal, rule, markers = self.state.calibration, self.spec.decision_rule, self.spec.marker_frequencies
        if cal is not None and cal.method == calibration.THRU_RESPONSE_METHOD:
            return TransmissionDevices(self.measuring, self.spec.bands, rule,  # type: ignore[arg-type]
                                       self.spec.measurement.device_max_vswr, markers)
        if cal is None or cal.method not in (calibration.ONE_PATH_METHOD, calibration.FULL_TWO_PORT_METHOD):
            return AsTerminatedDevices(self.measuring, self.spec.bands, rule, markers)  # type: ignore[arg-type]
        return TwoPortDevices(self.measuring, self.spec.bands, rule, cal.method,  # type: ignore[arg-type]
                              judged_figures(self.spec), self.spec.measurement.as_terminated, markers)

    def _batch(self, index: int, step: StepSpec) -> None:
        devices, termination = self.spec.devices, self.spec.termination
        self._devices = self._device_measurement()
        assert devices is not None and (termination is not None or not needs_termination(self.spec))
        overlap = not isinstance(self.station.operator, ConsoleOperator)
        pipeline = self._pipeline = _RecordingPipeline(overlap)
        self.measuring.operator.after_connect = pipeline.start  # type: ignore[attr-defined]
        try:
            for unit in self._units():
                if self._check_due():
                    self.verify()
                self._keep_calibration_valid()
                self._measure_one(unit, termination.name if termination is not None else None, pipeline)
                if self.stop.requested:
                    break
            final_check = self.spec.reverify.at_end and self.state.measured > self.state.checked_at_devices
            if self.stop.requested and not self._batch_exhausted():
                self.stopped_because = "stopped by Ctrl-C between devices"
            elif self.stop.requested and final_check:
                self.stopped_because = "stopped by Ctrl-C after the last device, before the batch's final check"
            elif final_check:
                self.verify()
        finally:
            self.measuring.operator.after_connect = None  # type: ignore[attr-defined]
            self._pipeline = None
            pipeline.close()

    def _batch_exhausted(self) -> bool:
        """Whether no device is left: every listed one recorded, or the person ended the batch
        (or it reached ``max_count``)."""
        devices = self.spec.devices
        assert devices is not None
        if devices.entry == "listed":
            return all(unit.serial.lower() in self.state.taken for unit in devices.units)
        return self._batch_ended or (devices.max_count is not None and len(self.state.taken) >= devices.max_count)

    def _study(self, index: int, step: StepSpec) -> None:
        from lineproof.study_steps import run_study

        run_study(self.spec, self.measuring, self._basis(), self.store, self.journal, self.view, self.facts,
                  self.station.operator, lambda: self.stop.requested)

    def _units(self):  # -> Iterator[DeviceUnit]
        devices = self.spec.devices
        assert devices is not None
        if devices.entry == "listed":
            for unit in devices.units:
                if self.stop.requested:
                    return
                if unit.serial.lower() not in self.state.taken:
                    yield unit
            return
        operator = self.station.operator
        assert isinstance(operator, ConsoleOperator)
        while not self.stop.requested:
            if devices.max_count is not None and len(self.state.taken) >= devices.max_count:
                self.view.note(f"batch complete: {devices.max_count} device(s), the most this sequence takes")
                return
            assert self._devices is not None
            output = self._devices.scan_output or self.spec.termination.name  # type: ignore[union-attr]
            serial = operator.scan_device(self.measuring.port, devices.model, output, self.state.taken)
            if serial is None:
                self._batch_ended = True
                return
            yield DeviceUnit(serial, devices.model, None, "scanned")

    def _measure_one(self, unit: DeviceUnit, termination: str | None, pipeline: _RecordingPipeline) -> None:
        device = DeviceIdentity(unit.serial, unit.model)
        basis = self._basis()
        measurement = self._devices
        assert measurement is not None
        connections = 1 if not isinstance(measurement, TwoPortDevices) else (
            2 if self.measuring.paths == "forward" else 1) + (self.spec.measurement.as_terminated == "measured")
        self.view.step_started(f"{unit.serial}: connect and sweep", total=connections + 1)
        if self.spec.devices is not None and self.spec.devices.entry == "listed":
            measurement.connect(device, termination)
        acquired = measurement.acquire(device, termination)
        self.view.step_advanced("swept")
        self.view.step_finished("")
        self.state.measured += 1
        self.state.taken.add(unit.serial.lower())
        position = self.state.measured
        pipeline.submit(lambda: self._record(device, position, acquired, basis))

    def _record(self, device: DeviceIdentity, position: int, acquired: Acquired, basis: MeasurementBasis) -> None:
        """Correct, judge with the uncertainty of every point, and record."""
        assert self._devices is not None
        evaluated = self._devices.evaluate(device, acquired, basis)
        recorded = record_device(self.store, self.journal, self.folder, self.facts, basis, evaluated.result, position,
                                 evaluated.frequencies_hz, evaluated.data, evaluated.uncertainty,
                                 arrays=evaluated.arrays, data=evaluated.description)
        with self._record_lock:
            self.recorded.append(recorded)
        self.view.device_recorded(recorded)
