"""An analyzer driven by a profile: the harness's analyzer primitives (identify, configure,
measure) turned into the profile's commands over a message session.

Knows no RF math: it returns raw or corrected traces exactly as the instrument gave them,
after checking that they are what was asked -- the right number of points, on the asked
frequency grid, with the instrument's error queue empty.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from lineproof.drivers import ieee488
from lineproof.drivers.instrument import ProfiledInstrument
from lineproof.drivers.profiles import AnalyzerCapabilities, AnalyzerProfile, Operation
from lineproof.drivers.session import MessageSession
from lineproof.errors import InputError, InstrumentError, LinkError, ReplyError
from lineproof.values import MeasuredSweep, SweepPlan

#: Relative tolerance of the frequency check: ASCII rows carry 9 significant digits
#: (PROTOCOLS.md §2), i.e. up to 5e-9 relative rounding, and REAL,32 (IEEE 754 single) a
#: 24-bit significand, 6e-8; any real grid mismatch (another start, stop or point count)
#: moves points by far more (a step of a 10,001-point sweep is 1e-4 of its span).
_GRID_TOLERANCE = {"REAL,32": 1.2e-7}
_GRID_TOLERANCE_DEFAULT = 1e-8
#: Bytes per value on the wire, for transfer timeouts: REAL sizes, and a generous width for
#: a decimal number with its separator.
_TEXT_NUMBER_BYTES = 24


@dataclass(frozen=True)
class Segment:
    """A contiguous slice of the asked grid that the instrument can sweep in one go."""

    first: int
    plan: SweepPlan


def split_plan(plan: SweepPlan, max_points: int) -> list[Segment]:
    """Cut a linear sweep into balanced segments of at most ``max_points`` whose union is
    exactly the asked grid: each segment starts and stops on grid points, none overlap."""
    count = -(-plan.points // max_points)
    base, extra = divmod(plan.points, count)
    grid = plan.frequencies()
    segments = []
    first = 0
    for index in range(count):
        size = base + (1 if index < extra else 0)
        segment_plan = SweepPlan(float(grid[first]), float(grid[first + size - 1]), size,
                                 plan.if_bandwidth_hz, plan.power_dbm)
        segments.append(Segment(first, segment_plan))
        first += size
    return segments


class ProfiledAnalyzer(ProfiledInstrument):
    """The analyzer interface of the harness, implemented from a profile."""

    profile: AnalyzerProfile

    def __init__(self, session: MessageSession, profile: AnalyzerProfile) -> None:
        super().__init__(session, profile)
        self.capabilities: AnalyzerCapabilities = profile.capabilities
        self._plan: SweepPlan | None = None
        self._segments: list[Segment] = []
        self._configured_segment: int | None = None

    # -- primitives -------------------------------------------------------------------

    def configure(self, plan: SweepPlan) -> None:
        """Set up a sweep; points beyond the instrument's maximum are split into segments."""
        caps = self.capabilities
        if plan.start_hz < caps.frequency_min_hz or plan.stop_hz > caps.frequency_max_hz:
            raise InputError(
                f"sweep {plan.describe()} is outside the analyzer's range "
                f"{caps.frequency_min_hz / 1e6:g}-{caps.frequency_max_hz / 1e6:g} MHz",
                path=self.profile.source, key="capabilities",
                fix="narrow the sweep or use an analyzer that covers it",
            )
        self._plan = None
        self._powered_on()  # read (and clear) the Power On bit left by start-up or a reset
        self._segments = split_plan(plan, caps.max_points)
        self._configured_segment = None
        for name in ("single_sweep_mode", "set_data_format"):
            self._setting(name)
        self._setting("set_if_bandwidth", if_bandwidth_hz=plan.if_bandwidth_hz)
        if plan.power_dbm is not None:
            self._setting("set_power", power_dbm=plan.power_dbm)
        self._configure_segment(0)
        self._plan = plan

    def reset(self) -> None:
        """Back to the instrument's power-on settings; configure again before measuring."""
        self._plan = None
        self._configured_segment = None
        super().reset()

    def read_temperature(self) -> float | None:
        """The instrument's own temperature (°C), when its profile has ``read_temperature``
        (a number reply); None when it does not say how to ask."""
        if self.profile.operation("read_temperature") is None:
            return None
        values = self._read_values("read_temperature", 1, 1)
        self._check_errors(self._op("read_temperature").send)
        if values.size != 1:
            raise ReplyError(f"a temperature reply has {values.size} numbers", resource=self.resource,
                             command=self._op("read_temperature").send, expected="one number (degrees Celsius)")
        return float(values[0])

    def measure(self, parameters: Sequence[str], corrected: bool = False) -> MeasuredSweep:
        """One sweep of the configured plan; one trace per parameter."""
        if self._plan is None:
            raise InputError("measure() before configure()", key="sweep", fix="configure a sweep plan first")
        unknown = [p for p in parameters if p not in self.capabilities.parameters]
        if unknown:
            raise InputError(
                f"the analyzer cannot measure {', '.join(unknown)}", path=self.profile.source,
                key="capabilities.parameters", fix=f"ask only for {', '.join(self.capabilities.parameters)}",
            )
        if corrected and not (self.capabilities.corrected_data and self.profile.operation("read_corrected")):
            raise InputError("this analyzer gives no corrected data", path=self.profile.source,
                             key="capabilities.corrected_data", fix="measure raw data and correct it in lineproof")
        read = "read_corrected" if corrected else "read_raw"
        try:
            pieces = self._measure_segments(parameters, read)
            self._check_errors()
        except InstrumentError as exc:
            self._configured_segment = None  # its settings may not have arrived: send them again
            self._raise_if_reset(exc)
            raise
        self._raise_if_reset(None)
        traces = {p: np.concatenate(chunks) for p, chunks in pieces.items()}
        return MeasuredSweep(self._plan.frequencies(), traces, corrected=corrected)

    def _measure_segments(self, parameters: Sequence[str], read: str) -> dict[str, list[np.ndarray]]:
        pieces: dict[str, list[np.ndarray]] = {p: [] for p in parameters}
        for index, segment in enumerate(self._segments):
            if self._configured_segment != index:
                self._configure_segment(index)
            self._sweep(segment.plan)
            for parameter in parameters:
                pieces[parameter].append(self._read_trace(read, parameter, segment.plan))
            if "frequency" not in self._op(read).columns:
                self._check_grid(segment.plan)
        return pieces

    def _raise_if_reset(self, failure: InstrumentError | None) -> None:
        """A reset or power glitch in the middle of a run loses every setting: the sweep it
        spoilt is refused, and the next one needs configure() again (IEEE 488.2 §11.5.1.1.2
        Power On bit of *ESR?, read at configure and after each measurement)."""
        try:
            reset = self._powered_on()
        except InstrumentError:
            if failure is None:
                raise
            return
        if not reset:
            return
        self._plan = None
        self._configured_segment = None
        raise ReplyError(
            "the instrument was reset or power-cycled during the measurement (Power On bit of its "
            "event status) and has lost its settings; the sweep is discarded -- configure it again",
            resource=self.resource, command=failure.command if failure else self._op("event_status").send,
            expected="no reset between configure and measure",
        ) from failure

    # -- timing -----------------------------------------------------------------------

    def sweep_time_estimate_s(self, plan: SweepPlan) -> float:
        timing = self.profile.timing
        return plan.points * (1.0 / plan.if_bandwidth_hz + timing.settle_per_point_s) + timing.sweep_overhead_s

    def _sweep_timeout(self, plan: SweepPlan) -> float:
        timing = self.profile.timing
        return timing.sweep_timeout_margin * self.sweep_time_estimate_s(plan) + timing.command_timeout_s

    def _transfer_timeout(self, operation: Operation, values_per_point: int, points: int) -> float:
        """Command timeout plus the wire time of the expected reply, with a margin: a slow
        serial line needs seconds for a trace that a socket moves in a millisecond."""
        if operation.reply == "block":
            width = 8 if self.capabilities.data_format == "REAL,64" else 4
        else:
            width = _TEXT_NUMBER_BYTES
        expected_bytes = points * max(values_per_point, len(operation.columns)) * width + 64
        timing = self.profile.timing
        base = operation.timeout_s or timing.command_timeout_s
        return base + timing.transfer_timeout_margin * expected_bytes * self.session.transport.seconds_per_byte

    # -- helpers ----------------------------------------------------------------------

    def _configure_segment(self, index: int) -> None:
        plan = self._segments[index].plan
        self._configured_segment = None
        if self.profile.operation("set_sweep"):
            self._setting("set_sweep", start_hz=plan.start_hz, stop_hz=plan.stop_hz, points=plan.points)
        else:
            self._setting("set_start", start_hz=plan.start_hz)
            self._setting("set_stop", stop_hz=plan.stop_hz)
            self._setting("set_points", points=plan.points)
        self._configured_segment = index

    def _sweep(self, plan: SweepPlan) -> None:
        trigger = self._op("trigger")
        timeout = self._sweep_timeout(plan)
        try:
            if trigger.reply == "none":
                self._call("trigger")
                self._sync(timeout)
            else:
                # A line instrument answers its trigger when the sweep is done.
                self._call("trigger", timeout_s=timeout)
        except LinkError as exc:
            exc.add_context(
                f"waiting for a sweep estimated at {self.sweep_time_estimate_s(plan):.3g} s (timeout {timeout:.3g} s; "
                f"if the instrument is slower, raise [timing] in {self.profile.source})"
            )
            raise

    def _read_trace(self, operation: str, parameter: str, plan: SweepPlan) -> np.ndarray:
        name = self.capabilities.instrument_name(parameter)
        if self.profile.operation("select_parameter"):
            self._call("select_parameter", parameter=name)
        op = self._op(operation)
        command = op.render(parameter=name)
        values = self._read_values(operation, 2, plan.points, complex_pairs=True, parameter=name)
        try:
            if op.reply == "block":
                trace = values
            elif op.reply == "rows":
                columns = list(op.columns)
                if "frequency" in columns:
                    self._compare_grid(values[:, columns.index("frequency")], plan, command)
                trace = values[:, columns.index("re")] + 1j * values[:, columns.index("im")]
            else:
                trace = ieee488.interleaved_to_complex(values)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=command) from exc
        if trace.size != plan.points:
            self._plan = None  # the instrument's settings are not ours: configure again
            raise ReplyError(f"trace has {trace.size} points; was the instrument reset or reconfigured "
                             "behind our back?", resource=self.resource, command=command,
                             expected=f"{plan.points} points")
        return trace

    def _check_grid(self, plan: SweepPlan) -> None:
        if not self.profile.operation("read_frequencies"):
            return
        operation = self._op("read_frequencies")
        values = self._read_values("read_frequencies", 1, plan.points)
        if operation.reply == "rows":
            values = values[:, list(operation.columns).index("frequency")]
        self._compare_grid(values, plan, operation.send)

    def _compare_grid(self, grid: np.ndarray, plan: SweepPlan, command: str) -> None:
        expected = plan.frequencies()
        tolerance = _GRID_TOLERANCE.get(self.capabilities.data_format, _GRID_TOLERANCE_DEFAULT)
        if grid.shape != expected.shape or not np.allclose(grid, expected, rtol=tolerance, atol=1e-3):
            self._plan = None  # the instrument's settings are not ours: configure again
            first = f"{grid[0]:.9g} Hz" if grid.size else "nothing"
            raise ReplyError(
                f"instrument swept another grid ({grid.size} points from {first}); "
                "was it reset or reconfigured behind our back? Configure it again",
                resource=self.resource, command=command, expected=plan.describe(),
            )

    def _read_values(self, name: str, values_per_point: int, points: int, complex_pairs: bool = False,
                     **values: object) -> np.ndarray:
        """Numbers as the operation's reply kind gives them: rows as a 2-D array, a number
        list as a 1-D array, a block as reals (or, with ``complex_pairs``, as complex)."""
        operation = self._op(name)
        command = operation.render(**values)
        timeout = self._transfer_timeout(operation, values_per_point, points)
        session = self.session
        if operation.reply == "rows":
            return session.query_rows(command, len(operation.columns), timeout, operation.idempotent)
        if operation.reply == "numbers":
            return session.query_numbers(command, timeout, operation.idempotent)
        payload = session.query_block(command, timeout, operation.idempotent)
        caps = self.capabilities
        decode = ieee488.decode_complex_payload if complex_pairs else ieee488.decode_real_payload
        try:
            return decode(payload, caps.data_format, caps.byte_order)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=command,
                             expected=f"{caps.data_format} values") from exc
