"""The one exception tree of lineproof.

Every layer may import this module; it imports nothing of ours.

::

    LineproofError
    ├─ InstrumentError          resource, last command, what was expected
    │  ├─ LinkError             connect failed, timeout, link lost
    │  ├─ ReplyError            malformed block, unexpected or unparsable reply
    │  └─ InstrumentReported    code and message from the instrument's error queue
    ├─ CalibrationError         standards missing, grids differ, ill-conditioned solve, out of range
    ├─ RunHalted                a step's precondition failed (termination not qualified, ...)
    └─ InputError               sequence / profile / kit / scenario file problems: file, key, line, fix

A device that fails its limits is a *verdict*, never an exception.  Lower-layer errors
(OSError, pyvisa's VisaIOError, serial.SerialException) are translated once, at the
transport boundary, with ``raise ... from exc``; context (device, step) is attached with
:meth:`LineproofError.add_context` as the error rises.
"""

from __future__ import annotations


class LineproofError(Exception):
    """Base of every error lineproof raises on purpose."""

    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message
        self.context: list[str] = []

    def add_context(self, text: str) -> LineproofError:
        """Record where the error passed (a step, a device); returns self for ``raise``."""
        self.context.append(text)
        return self

    def __str__(self) -> str:
        if not self.context:
            return self.message
        return self.message + "".join(f"\n  while {c}" for c in self.context)


class InstrumentError(LineproofError):
    """Something went wrong talking to an instrument."""

    def __init__(
        self,
        message: str,
        *,
        resource: str | None = None,
        command: str | None = None,
        expected: str | None = None,
    ) -> None:
        parts = [message]
        if resource:
            parts.append(f"resource {resource}")
        if command:
            parts.append(f"command {command!r}")
        if expected:
            parts.append(f"expected {expected}")
        super().__init__("; ".join(parts))
        self.problem = message
        self.resource = resource
        self.command = command
        self.expected = expected


class LinkError(InstrumentError):
    """The link could not be opened, timed out or was lost."""


class ReplyError(InstrumentError):
    """The instrument answered, but not with what the protocol allows."""


class InstrumentReported(InstrumentError):
    """The instrument put an entry in its error queue."""

    def __init__(
        self,
        code: int,
        text: str,
        *,
        resource: str | None = None,
        command: str | None = None,
    ) -> None:
        super().__init__(
            f"instrument reported error {code}, {text!r}", resource=resource, command=command
        )
        self.code = code
        self.text = text


class CalibrationError(LineproofError):
    """A calibration cannot be computed, loaded or applied."""


class RunHalted(LineproofError):
    """A step found that the run must not go on (e.g. the termination failed qualification).

    ``resumable`` is False when resuming would meet the same refusal (a stored calibration the
    sequence asks to reuse cannot serve): the message's fix is then the only way on."""

    def __init__(self, message: str, *, resumable: bool = True) -> None:
        super().__init__(message)
        self.resumable = resumable


class InputError(LineproofError):
    """A file the user gave (sequence, profile, cal kit, scenario) is wrong.

    The message names the file, the key (and line where known), the problem and the fix.
    """

    def __init__(
        self,
        problem: str,
        *,
        path: str | None = None,
        key: str | None = None,
        line: int | None = None,
        fix: str | None = None,
    ) -> None:
        where = path or "<input>"
        if line is not None:
            where += f":{line}"
        if key:
            where += f" [{key}]"
        message = f"{where}: {problem}"
        if fix:
            message += f" -- fix: {fix}"
        super().__init__(message)
        self.path = path
        self.key = key
        self.line = line
        self.problem = problem
        self.fix = fix
