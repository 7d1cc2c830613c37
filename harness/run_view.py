"""What a person or a line system sees of a run.

:class:`ConsoleRunView` draws rich progress bars for the run and the current step, prints a
live line per device with its verdict, and asks the operator's questions with the bars out of
the way.  :class:`JsonRunView` writes one JSON object per event to standard output for a line
system (prompts, when a person is needed, go to standard error).  Both are called from the
run's threads; each serialises its own output.
"""

from __future__ import annotations

import json
import math
import sys
import threading
from typing import Any, Protocol, TextIO

from lineproof.recording import RecordedDevice, marker_items
from lineproof.values import BandResult, TerminationQualification, VerificationResult


class RunView(Protocol):
    def run_started(self, run_id: str, sequence: str, station: str, planned: int | None, resumed: bool) -> None: ...
    def step_started(self, label: str, total: int | None = None) -> None: ...
    def step_advanced(self, note: str = "") -> None: ...
    def step_finished(self, text: str) -> None: ...
    def device_recorded(self, recorded: RecordedDevice) -> None: ...
    def qualification(self, result: TerminationQualification, reused: bool) -> None: ...
    def verification(self, result: VerificationResult, reused: bool) -> None: ...
    def note(self, text: str) -> None: ...
    def suspect_results(self, serials: list[str], reason: str, command: str) -> None: ...
    def ask(self, prompt: str) -> str | None: ...
    def run_finished(self, summary: dict[str, Any]) -> None: ...
    def close(self, reason: str | None = None) -> None: ...


def _band_text(band: BandResult) -> str:
    text = band.limit.name
    if band.worst_vswr is not None:  # none in transmission-only data
        text += f" {band.worst_vswr:.3f}"
        if not math.isinf(band.limit.max_vswr):
            text += f" (limit {band.limit.max_vswr:.2f})"
    if band.worst_insertion_loss_db is not None:
        text += f" IL {band.worst_insertion_loss_db:.3f} dB"
        if band.limit.max_insertion_loss_db is not None:
            text += f" (limit {band.limit.max_insertion_loss_db:.2f})"
    return f"{text} {band.verdict.value}"


def device_line(recorded: RecordedDevice) -> str:
    """One line per device: position, serial, verdict and each band's worst VSWR (of the
    headline figure) and insertion loss against their limits."""
    result = recorded.result
    bands = "  ".join(_band_text(b) for b in result.bands)
    return f"{recorded.position:>4}  {result.device.serial:<16} {result.verdict.value.upper():<13} {bands}"


def _band_json(band: BandResult) -> dict[str, Any]:
    worst = band.worst_vswr
    found: dict[str, Any] = {"band": band.limit.name, "worst_vswr": None if worst is None else round(worst, 5),
                             "limit_vswr": None if math.isinf(band.limit.max_vswr) else band.limit.max_vswr,
                             "worst_frequency_hz": band.worst_frequency_hz,
                             "verdict": band.verdict.value}
    if band.figures and (len(band.figures) > 1 or worst is None):
        found["figures"] = [{"figure": f.figure, "worst": round(f.worst, 6), "worst_frequency_hz": f.worst_frequency_hz,
                             "limit": f.limit, "expanded_uncertainty": f.expanded_uncertainty,
                             "verdict": None if f.verdict is None else f.verdict.value} for f in band.figures]
    return found


def _read_line(stream: TextIO) -> str | None:
    line = stream.readline()
    return None if line == "" else line.rstrip("\r\n")


class ConsoleRunView:
    """Progress bars and live lines on a terminal (plain lines when output is not a terminal)."""

    def __init__(self, out: TextIO | None = None, stdin: TextIO | None = None) -> None:
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

        self._stdin = stdin or sys.stdin
        self.console = Console(file=out or sys.stdout, highlight=False, soft_wrap=True)
        self._progress = Progress(
            SpinnerColumn(), TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
            TimeElapsedColumn(), console=self.console, transient=True, disable=not self.console.is_terminal,
        )
        self._run_task: Any = None
        self._step_task: Any = None
        self._lock = threading.RLock()
        self._started = False

    def _print(self, text: str, style: str | None = None) -> None:
        with self._lock:
            self.console.print(text, style=style, markup=False)

    def run_started(self, run_id: str, sequence: str, station: str, planned: int | None, resumed: bool) -> None:
        self._print(f"{'resuming' if resumed else 'run'} {run_id}: {sequence} on {station}", "bold")
        with self._lock:
            self._run_task = self._progress.add_task("devices recorded", total=planned)
            self._progress.start()
            self._started = True

    def step_started(self, label: str, total: int | None = None) -> None:
        with self._lock:
            if self._step_task is not None:
                self._progress.remove_task(self._step_task)
            self._step_task = self._progress.add_task(label, total=total)

    def step_advanced(self, note: str = "") -> None:
        with self._lock:
            if self._step_task is not None:
                self._progress.advance(self._step_task)

    def step_finished(self, text: str) -> None:
        with self._lock:
            if self._step_task is not None:
                self._progress.remove_task(self._step_task)
                self._step_task = None
        if text:
            self._print(text)

    def device_recorded(self, recorded: RecordedDevice) -> None:
        style = {"pass": "green", "fail": "red"}.get(recorded.result.verdict.value, "yellow")
        self._print(device_line(recorded), style)
        with self._lock:
            if self._run_task is not None:
                self._progress.advance(self._run_task)

    def qualification(self, result: TerminationQualification, reused: bool) -> None:
        self._print(f"termination {result.describe()}{' (kept from before the interruption)' if reused else ''}")

    def verification(self, result: VerificationResult, reused: bool) -> None:
        kept = " (kept from before the interruption)" if reused else ""
        self._print(f"check after {result.devices_before} device(s): {result.describe()}{kept}",
                    None if result.passed and result.in_control else "yellow" if result.passed else "bold red")

    def note(self, text: str) -> None:
        self._print(text)

    def suspect_results(self, serials: list[str], reason: str, command: str) -> None:
        self._print(f"{len(serials)} result(s) since the last passing check are now SUSPECT: {', '.join(serials)} "
                    f"(measure them again with {command})", "bold red")

    def ask(self, prompt: str) -> str | None:
        with self._lock:
            if self._started:
                self._progress.stop()
            self.console.print(f"\n>>> {prompt}", style="bold cyan", markup=False)
            self.console.print("> ", end="", markup=False)
            self.console.file.flush()
        try:
            return _read_line(self._stdin)
        finally:
            with self._lock:
                if self._started:
                    self._progress.start()

    def run_finished(self, summary: dict[str, Any]) -> None:
        self.close()
        counts = summary.get("counts", {})
        self._print(f"\nrun {summary['run_id']} {summary['status']}"
                    + (f": {summary['reason']}" if summary.get("reason") else ""), "bold")
        suspect = f", {counts['suspect']} SUSPECT (a failed check put them in doubt)" if counts.get("suspect") else ""
        self._print(f"{counts.get('total', 0)} device(s): {counts.get('pass', 0)} passed, {counts.get('fail', 0)} failed, "
                    f"{counts.get('indeterminate', 0)} indeterminate{suspect}")
        for label, key in (("Touchstone files", "run_folder"), ("Results database", "database"), ("Report", "report")):
            if summary.get(key):
                self._print(f"{label}: {summary[key]}")
        if summary.get("resume_command"):
            self._print(f"To continue: {summary['resume_command']}", "bold")
        if summary.get("report_command"):
            self._print(f"For the report: {summary['report_command']}")

    def close(self, reason: str | None = None) -> None:
        with self._lock:
            if self._started:
                self._progress.stop()
                self._started = False


class JsonRunView:
    """One JSON object per line on standard output, for a line system.

    Steps come in pairs: every ``step-started`` is followed, before the next one, by a
    ``step-finished`` (or, when the run ends inside the step, a ``step-failed`` with the
    reason) naming the same step."""

    def __init__(self, out: TextIO | None = None, prompts: TextIO | None = None, stdin: TextIO | None = None) -> None:
        self._out = out or sys.stdout
        self._prompts = prompts or sys.stderr
        self._stdin = stdin or sys.stdin
        self._lock = threading.RLock()
        self._step: str | None = None  # the step started and not yet finished

    def _emit(self, event: str, **fields: Any) -> None:
        with self._lock:
            self._out.write(json.dumps({"event": event, **fields}) + "\n")
            self._out.flush()

    def run_started(self, run_id: str, sequence: str, station: str, planned: int | None, resumed: bool) -> None:
        self._emit("run-started", run_id=run_id, sequence=sequence, station=station, planned_devices=planned,
                   resumed=resumed)

    def step_started(self, label: str, total: int | None = None) -> None:
        with self._lock:
            self._step = label
            self._emit("step-started", step=label)

    def step_advanced(self, note: str = "") -> None:
        pass

    def step_finished(self, text: str) -> None:
        with self._lock:
            step, self._step = self._step, None
            self._emit("step-finished", step=step, text=text)

    def _step_failed(self, reason: str) -> None:
        with self._lock:
            step, self._step = self._step, None
            if step is not None:
                self._emit("step-failed", step=step, reason=reason)

    def device_recorded(self, recorded: RecordedDevice) -> None:
        result = recorded.result
        self._emit("device", position=recorded.position, serial=result.device.serial, model=result.device.model,
                   verdict=result.verdict.value, measured_utc=result.measured_utc, file=str(recorded.file),
                   figure=result.figure, bands=[_band_json(b) for b in result.bands],
                   markers=dict(marker_items(result)))

    def qualification(self, result: TerminationQualification, reused: bool) -> None:
        self._emit("termination", name=result.name, worst_vswr=round(result.worst_vswr, 5),
                   limit_vswr=result.limit_vswr, passed=result.passed, reused=reused)

    def verification(self, result: VerificationResult, reused: bool) -> None:
        self._emit("verification", check_standard=result.check_standard, devices_before=result.devices_before,
                   worst_deviation=round(result.sweep_worst_deviation, 6), tolerance=result.tolerance,
                   en=None if result.en is None else round(result.en, 4), agrees=result.agrees,
                   control_signals=None if result.control_signals is None else list(result.control_signals),
                   in_control=result.in_control, passed=result.passed, reused=reused)

    def note(self, text: str) -> None:
        self._emit("note", text=text)

    def suspect_results(self, serials: list[str], reason: str, command: str) -> None:
        self._emit("suspect", serials=serials, reason=reason, remeasure_command=command)

    def ask(self, prompt: str) -> str | None:
        self._emit("prompt", text=prompt)
        with self._lock:
            self._prompts.write(f">>> {prompt}\n> ")
            self._prompts.flush()
        return _read_line(self._stdin)

    def run_finished(self, summary: dict[str, Any]) -> None:
        self._step_failed(str(summary.get("reason") or summary.get("status")))
        self._emit("run-finished", **summary)

    def close(self, reason: str | None = None) -> None:
        self._step_failed(reason or "the run stopped")
