"""Fault injection: faults armed for one instrument, fired by its server on the next
matching command or reply.

Kinds (PROTOCOLS.md §3):

- ``drop`` -- close the connection instead of replying (serial: go silent until the port is
  closed and opened again);
- ``stall {seconds}`` -- reply only after ``seconds``;
- ``truncate {bytes}`` -- send a data reply (a block, an ASCII trace, serial rows) short by
  ``bytes``, without its terminator, then nothing more;
- ``garbage`` -- replace the next reply with bytes that are not the protocol;
- ``error {code, text}`` -- put an entry in the error queue as if the next command caused it
  (serial: answer that command with the error line instead);
- ``reset`` -- reset to power-on settings before serving the next command.

Common fields: ``count`` (fire on the next n matching events, default 1), ``after`` (let that
many matching events pass first, default 0) and ``match`` (only commands containing this text,
case-insensitive).  A firing is recorded with the command that triggered it.
"""

from __future__ import annotations

import threading
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

FAULT_KINDS = ("drop", "stall", "truncate", "garbage", "error", "reset")

#: Fields each kind takes besides the common ones, with their types and defaults.
_KIND_FIELDS: dict[str, dict[str, tuple[type | tuple[type, ...], Any]]] = {
    "drop": {},
    "stall": {"seconds": ((int, float), None)},
    "truncate": {"bytes": (int, None)},
    "garbage": {},
    "error": {"code": (int, None), "text": (str, None)},
    "reset": {},
}
_COMMON_FIELDS = {"count": (int, 1), "after": (int, 0), "match": (str, "")}
#: Longest stall accepted: long enough to outlast any client timeout, short enough that a
#: forgotten fault cannot hang a bench for good.
MAX_STALL_S = 600.0
#: What a garbage reply looks like: bytes outside printable ASCII, no header, no block.
GARBAGE = b"\x15\xfe\x00#?~\x7f\x8a\xc3GARBLED\x01\x02"


class FaultSpecError(ValueError):
    """A fault description that cannot be armed; the text says what to fix."""


@dataclass
class ArmedFault:
    """One armed fault and what has happened to it."""

    kind: str
    count: int = 1
    after: int = 0
    match: str = ""
    seconds: float = 0.0
    bytes: int = 0
    code: int = 0
    text: str = ""
    fired: list[str] = field(default_factory=list)

    def describe(self) -> dict[str, Any]:
        out: dict[str, Any] = {"kind": self.kind, "remaining": self.count, "after": self.after,
                               "fired": list(self.fired)}
        if self.match:
            out["match"] = self.match
        for name in _KIND_FIELDS[self.kind]:
            out[name] = getattr(self, name)
        return out


def parse_fault(spec: Mapping[str, Any], where: str = "fault") -> ArmedFault:
    """Validate a fault description (from the control channel or a scenario)."""
    kind = spec.get("kind")
    if kind not in FAULT_KINDS:
        raise FaultSpecError(f"{where}: kind must be one of {', '.join(FAULT_KINDS)}, got {kind!r}")
    allowed = {**_COMMON_FIELDS, **_KIND_FIELDS[kind]}
    unknown = set(spec) - set(allowed) - {"kind", "instrument", "op"}
    if unknown:
        raise FaultSpecError(f"{where}: {_article(kind)} {kind} fault has no field {sorted(unknown)[0]!r}; "
                             f"its fields are: {', '.join(sorted(allowed))}")
    values: dict[str, Any] = {}
    for name, (kinds, default) in allowed.items():
        value = spec.get(name, default)
        if value is None:
            raise FaultSpecError(f"{where}: {_article(kind)} {kind} fault needs {name}")
        if isinstance(value, bool) or not isinstance(value, kinds):
            raise FaultSpecError(f"{where}: {name} must be {_type_name(kinds)}, got {value!r}")
        values[name] = value
    if values["count"] < 1 or values["after"] < 0:
        raise FaultSpecError(f"{where}: count must be 1 or more and after 0 or more")
    if kind == "stall" and not 0 < values["seconds"] <= MAX_STALL_S:
        raise FaultSpecError(f"{where}: seconds must be more than 0 and at most {MAX_STALL_S:g}")
    if kind == "truncate" and values["bytes"] < 1:
        raise FaultSpecError(f"{where}: bytes must be 1 or more")
    if kind == "error" and not values["text"].isprintable():
        raise FaultSpecError(f"{where}: text must be printable")
    return ArmedFault(kind, **values)


def _article(word: str) -> str:
    return "an" if word[0] in "aeiou" else "a"


def _type_name(kinds: type | tuple[type, ...]) -> str:
    names = {int: "an integer", float: "a number", str: "a string"}
    kinds = kinds if isinstance(kinds, tuple) else (kinds,)
    return "a number" if float in kinds else names[kinds[0]]


class FaultPlan:
    """The faults armed for one instrument (thread-safe)."""

    def __init__(self, instrument: str) -> None:
        self.instrument = instrument
        self._lock = threading.Lock()
        self._armed: list[ArmedFault] = []
        self._spent: list[ArmedFault] = []

    def arm(self, spec: Mapping[str, Any], where: str = "fault") -> ArmedFault:
        fault = parse_fault(spec, where)
        with self._lock:
            self._armed.append(fault)
        return fault

    def clear(self) -> None:
        with self._lock:
            self._armed.clear()
            self._spent.clear()

    def take(self, kinds: Iterable[str], command: str) -> ArmedFault | None:
        """The first armed fault of one of ``kinds`` that fires on ``command`` now, if any."""
        kinds = tuple(kinds)
        text = command.lower()
        with self._lock:
            for fault in self._armed:
                if fault.kind not in kinds or (fault.match and fault.match.lower() not in text):
                    continue
                if fault.after > 0:
                    fault.after -= 1
                    continue
                fault.count -= 1
                fault.fired.append(command)
                if fault.count == 0:
                    self._armed.remove(fault)
                    self._spent.append(fault)
                return fault
        return None

    def describe(self) -> dict[str, Any]:
        with self._lock:
            return {"armed": [f.describe() for f in self._armed],
                    "spent": [f.describe() for f in self._spent],
                    "fired": sum(len(f.fired) for f in self._armed + self._spent)}
