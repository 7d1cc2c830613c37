"""The command set of the simulated serial analyzer: our own line protocol (PROTOCOLS.md §2).

Pure: a command line in, reply lines out (or a :class:`SerialCommandError`).  Echo, the
prompt, line ends, pacing at the baud rate and faults are the transport's job
(:mod:`.pty_server`).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from lineproof.simulators.analyzer_sim import SimulatedAnalyzer

#: Error codes of PROTOCOLS.md §2.
UNKNOWN_COMMAND, WRONG_ARGUMENTS, BAD_NUMBER, OUT_OF_RANGE, NO_DATA = 10, 11, 20, 21, 30
IF_BANDWIDTH_RANGE_HZ = (1.0, 1e6)
LEVEL_RANGE_DBM = (-60.0, 20.0)
#: A decimal number: digits with an optional point and exponent (no inf, nan or hex).
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")


class SerialCommandError(Exception):
    """A command the instrument refuses; sent as ``?<code> <text>``."""

    def __init__(self, code: int, text: str) -> None:
        super().__init__(f"?{code} {text}")
        self.code = code
        self.text = text

    def line(self) -> str:
        return f"?{self.code} {self.text}"


@dataclass
class SerialReply:
    """Reply lines (without line ends); ``data`` marks a rows reply, ``ready_at`` the
    monotonic time before which the reply may not be sent (a sweep in progress)."""

    lines: list[str] = field(default_factory=list)
    data: bool = False
    ready_at: float = 0.0


def _number(text: str) -> float:
    if not _NUMBER.fullmatch(text):
        raise SerialCommandError(BAD_NUMBER, f"number not understood: {text[:20]}")
    return float(text)


def _in_range(name: str, value: float, low: float, high: float) -> float:
    if not low <= value <= high:
        raise SerialCommandError(OUT_OF_RANGE, f"{name} out of range {low:g}..{high:g}")
    return value


class SerialAnalyzerFront:
    """The verbs of the serial protocol, bound to a :class:`SimulatedAnalyzer`."""

    def __init__(self, analyzer: SimulatedAnalyzer) -> None:
        self.analyzer = analyzer
        self._verbs = {
            "hello": (0, self._hello),
            "band": (3, self._band),
            "ifbw": (1, self._ifbw),
            "level": (1, self._level),
            "take": (0, self._take),
            "rows": (None, self._rows),
            "restart": (0, self._restart),
        }

    def execute(self, line: str) -> SerialReply:
        words = line.split()
        if not words:
            return SerialReply()
        verb = words[0].lower()
        if verb not in self._verbs:
            raise SerialCommandError(UNKNOWN_COMMAND, f"unknown command {words[0][:20]}")
        count, handler = self._verbs[verb]
        if count is not None and len(words) - 1 != count:
            raise SerialCommandError(WRONG_ARGUMENTS, f"{verb} takes {count} argument{'s' if count != 1 else ''}")
        return handler(words[1:])

    def reset(self) -> None:
        self.analyzer.reset()

    # -- verbs ----------------------------------------------------------------------------

    def _hello(self, args: list[str]) -> SerialReply:
        return SerialReply([self.analyzer.settings.identity])

    def _band(self, args: list[str]) -> SerialReply:
        s = self.analyzer.settings
        start, stop, points = (_number(a) for a in args)
        _in_range("start", start, s.frequency_min_hz, s.frequency_max_hz)
        _in_range("stop", stop, start, s.frequency_max_hz)
        if points != int(points):
            raise SerialCommandError(BAD_NUMBER, f"points must be a whole number: {args[2][:20]}")
        _in_range("points", points, 2, s.max_points)
        with self.analyzer.lock:
            self.analyzer.start_hz, self.analyzer.stop_hz, self.analyzer.points = start, stop, int(points)
        return SerialReply()

    def _ifbw(self, args: list[str]) -> SerialReply:
        value = _in_range("ifbw", _number(args[0]), *IF_BANDWIDTH_RANGE_HZ)
        with self.analyzer.lock:
            self.analyzer.if_bandwidth_hz = value
        return SerialReply()

    def _level(self, args: list[str]) -> SerialReply:
        value = _in_range("level", _number(args[0]), *LEVEL_RANGE_DBM)
        with self.analyzer.lock:
            self.analyzer.power_dbm = value
        return SerialReply()

    def _take(self, args: list[str]) -> SerialReply:
        try:
            duration = self.analyzer.sweep()
        except ValueError as exc:  # e.g. a Touchstone object asked outside its file's range
            raise SerialCommandError(OUT_OF_RANGE, f"band outside what is connected: {exc}"[:120]) from exc
        return SerialReply([f"took {self.analyzer.points} in {round(duration * 1e3)} ms"],
                           ready_at=self.analyzer.busy_until)

    def _rows(self, args: list[str]) -> SerialReply:
        if not args or args[0].lower() not in ("raw", "grid"):
            raise SerialCommandError(WRONG_ARGUMENTS, "rows takes raw <sij> or grid")
        if args[0].lower() == "grid":
            if len(args) != 1:
                raise SerialCommandError(WRONG_ARGUMENTS, "rows grid takes no more arguments")
            grid = self.analyzer.frequencies()
            return SerialReply([f"{f:.9g}" for f in grid.tolist()] + [f"end {grid.size}"], data=True)
        if len(args) != 2:
            raise SerialCommandError(WRONG_ARGUMENTS, "rows raw takes one parameter, e.g. rows raw s11")
        name = args[1].upper()
        if name not in self.analyzer.settings.parameters:
            measured = " ".join(p.lower() for p in self.analyzer.settings.parameters)
            raise SerialCommandError(OUT_OF_RANGE, f"no parameter {args[1][:8]} (this analyzer measures {measured})")
        with self.analyzer.lock:
            trace = self.analyzer.traces.get(name)
            grid = self.analyzer.trace_frequencies
        if trace is None:
            raise SerialCommandError(NO_DATA, "no data yet (take first)")
        return SerialReply(_rows(grid, trace) + [f"end {trace.size}"], data=True)

    def _restart(self, args: list[str]) -> SerialReply:
        self.reset()
        return SerialReply()


def _rows(grid: np.ndarray, trace: np.ndarray) -> list[str]:
    """``<frequency_hz> <re> <im>`` with 9 significant digits (PROTOCOLS.md §2)."""
    return [f"{f:.9g} {re:.9g} {im:.9g}"
            for f, re, im in zip(grid.tolist(), trace.real.tolist(), trace.imag.tolist(), strict=True)]
