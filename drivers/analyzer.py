"""An analyzer driven by a profile: the harness's analyzer primitives (identify, configure,
measure) turned into the profile's commands over a message session.

Knows no RF math: it returns raw or corrected traces exactly as the instrument gave them.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from lineproof.drivers import ieee488
from lineproof.drivers.profiles import AnalyzerProfile, Operation
from lineproof.drivers.session import MessageSession
from lineproof.errors import InputError, ReplyError
from lineproof.values import InstrumentIdentity, MeasuredSweep, SweepPlan

#: Relative tolerance when checking the instrument's frequency list against the plan.
_GRID_TOLERANCE = 1e-9


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
        segment_plan = SweepPlan(
            float(grid[first]), float(grid[first + size - 1]), size,
            plan.if_bandwidth_hz, plan.power_dbm,
        )
        segments.append(Segment(first, segment_plan))
        first += size
    return segments


class ProfiledAnalyzer:
    """The analyzer interface of the harness, implemented from a profile."""

    def __init__(self, session: MessageSession, profile: AnalyzerProfile) -> None:
        self.session = session
        self.profile = profile
        self.capabilities = profile.capabilities
        self._plan: SweepPlan | None = None
        self._segments: list[Segment] = []
        self._configured_segment: int | None = None

    @property
    def resource(self) -> str:
        return self.session.resource

    # -- primitives -------------------------------------------------------------------

    def identify(self) -> InstrumentIdentity:
        reply = self._query("identify")
        try:
            return ieee488.parse_identity(reply, self.resource)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=self._op("identify").send) from exc

    def reset(self) -> None:
        for name in ("reset", "clear"):
            if self.profile.operation(name):
                self._send(name)
        self._configured_segment = None
        self._sync()

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
        self._plan = plan
        self._segments = split_plan(plan, caps.max_points)
        if self.profile.operation("single_sweep_mode"):
            self._send("single_sweep_mode")
        if self.profile.operation("set_data_format"):
            self._send("set_data_format")
        if self.profile.operation("set_if_bandwidth"):
            self._send("set_if_bandwidth", if_bandwidth_hz=plan.if_bandwidth_hz)
        if plan.power_dbm is not None and self.profile.operation("set_power"):
            self._send("set_power", power_dbm=plan.power_dbm)
        self._configure_segment(0)

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
        read = "read_corrected" if corrected else "read_raw"
        pieces: dict[str, list[np.ndarray]] = {p: [] for p in parameters}
        for index, segment in enumerate(self._segments):
            if self._configured_segment != index:
                self._configure_segment(index)
            self._sweep(segment.plan)
            for parameter in parameters:
                pieces[parameter].append(self._read_trace(read, parameter, segment.plan.points))
        traces = {p: np.concatenate(chunks) for p, chunks in pieces.items()}
        return MeasuredSweep(self._plan.frequencies(), traces, corrected=corrected)

    def close(self) -> None:
        self.session.close()

    # -- helpers ----------------------------------------------------------------------

    def sweep_time_estimate_s(self, plan: SweepPlan) -> float:
        timing = self.profile.timing
        return plan.points * (1.0 / plan.if_bandwidth_hz + timing.settle_per_point_s) + timing.sweep_overhead_s

    def _configure_segment(self, index: int) -> None:
        plan = self._segments[index].plan
        self._send("set_start", start_hz=plan.start_hz)
        self._send("set_stop", stop_hz=plan.stop_hz)
        self._send("set_points", points=plan.points)
        self._check_errors()
        self._configured_segment = index
        if self.profile.operation("read_frequencies"):
            self._check_grid(plan)

    def _sweep(self, plan: SweepPlan) -> None:
        timing = self.profile.timing
        timeout = timing.sweep_timeout_margin * self.sweep_time_estimate_s(plan) + timing.command_timeout_s
        self._send("trigger")
        self._sync(timeout)

    def _read_trace(self, operation: str, parameter: str, points: int) -> np.ndarray:
        if self.profile.operation("select_parameter"):
            self._send("select_parameter", parameter=parameter)
        values = self._read_numbers(operation, parameter=parameter)
        try:
            trace = ieee488.interleaved_to_complex(values)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=self._op(operation).send) from exc
        if trace.size != points:
            raise ReplyError(
                f"trace has {trace.size} points", resource=self.resource,
                command=self._op(operation).render(parameter=parameter), expected=f"{points} points",
            )
        return trace

    def _check_grid(self, plan: SweepPlan) -> None:
        grid = self._read_numbers("read_frequencies")
        expected = plan.frequencies()
        if grid.shape != expected.shape or not np.allclose(grid, expected, rtol=_GRID_TOLERANCE, atol=1e-3):
            raise ReplyError(
                f"instrument sweeps a different grid ({grid.size} points from {grid[:1]} Hz)",
                resource=self.resource, command=self._op("read_frequencies").send,
                expected=f"{plan.describe()}",
            )

    def _read_numbers(self, name: str, **values: object) -> np.ndarray:
        operation = self._op(name)
        command = operation.render(**values)
        timeout = self.profile.timing.command_timeout_s
        if operation.reply == "numbers" or self.capabilities.data_format == "ASCII":
            return self.session.query_numbers(command, timeout)
        payload = self.session.query_block(command, timeout)
        try:
            return ieee488.decode_real_payload(payload, self.capabilities.data_format, self.capabilities.byte_order)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=command) from exc

    def _op(self, name: str) -> Operation:
        operation = self.profile.operation(name)
        if operation is None:
            raise InputError(f"profile has no {name} operation", path=self.profile.source,
                             key=f"operations.{name}", fix=f"add {name} to [operations]")
        return operation

    def _send(self, name: str, **values: object) -> None:
        self.session.write(self._op(name).render(**values), self.profile.timing.command_timeout_s)

    def _query(self, name: str, **values: object) -> str:
        return self.session.query(self._op(name).render(**values), self.profile.timing.command_timeout_s)

    def _sync(self, timeout_s: float | None = None) -> None:
        wait = self.profile.operation("wait")
        if wait is not None:
            self.session.wait_complete(wait.send, timeout_s or self.profile.timing.command_timeout_s)

    def _check_errors(self) -> None:
        next_error = self.profile.operation("next_error")
        if next_error is not None:
            self.session.drain_errors(next_error.send, caused_by=self.session.last_command)
