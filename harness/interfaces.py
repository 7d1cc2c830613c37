"""The contracts the harness's steps call: an analyzer and an operator.

Steps see these interfaces and value types only -- never a transport or a command string.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Protocol

from lineproof.values import InstrumentIdentity, MeasuredSweep, SweepPlan


class AnalyzerCapabilitiesView(Protocol):
    ports: int
    paths: str
    frequency_min_hz: float
    frequency_max_hz: float
    max_points: int
    parameters: tuple[str, ...]


class Analyzer(Protocol):
    """A vector network analyzer as the harness sees it."""

    capabilities: AnalyzerCapabilitiesView

    def identify(self) -> InstrumentIdentity: ...

    def configure(self, plan: SweepPlan) -> None: ...

    def measure(self, parameters: Sequence[str], corrected: bool = False) -> MeasuredSweep: ...

    def close(self) -> None: ...


class Switch(Protocol):
    """A switch matrix as the harness sees it (driven by a switch profile)."""

    def identify(self) -> InstrumentIdentity: ...

    def route(self, channels: Sequence[str]) -> None:
        """Open every channel, close exactly ``channels`` (SCPI channel-list entries such as
        ``"1!3"``) and confirm the closed set by querying it."""

    def close(self) -> None: ...


class Operator(Protocol):
    """Whoever (or whatever) connects things to the analyzer's ports: a person at a prompt,
    a switch matrix, or a simulated operator."""

    def connect(self, port: int, thing: str, output: str | None, instruction: str,
                reversed: bool = False) -> None:
        """Connect ``thing`` to ``port`` and return when it is done.

        ``output`` says what a two-port's output goes to: the name of a one-port termination,
        ``"port:2"`` for analyzer port 2, or None for a one-port ``thing``.  ``instruction`` is
        the sentence a person would be shown.  ``reversed`` turns a two-port round (its output
        on ``port``): how a forward-only analyzer measures a device's reverse direction.
        """
