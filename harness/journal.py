"""The run journal: one JSON object per line, appended and fsync'ed as the run goes.

It tells a resumed run where the interrupted one stood: which steps finished, which
calibration was in use, which devices were committed.  The results database stays the
authority on devices (a device is committed when its database transaction is); the journal
is written right after each commit, and a resumed run reconciles the two.  A line torn by a
kill is recognised (it has no line end or is not JSON), reported and cut off before the
journal is appended to again, so the file stays valid JSON lines.

Events (``"event"`` and its fields; every line also has ``"utc"``)::

    run-started        run_id, sequence, sequence_sha256, operator, records
    resumed            attempt
    step-done          index, action
    calibrated         calibration_id, reused
    qualified          qualification_id, passed
    verified           verification_id, passed, devices_before
    device-committed   serial, position, file, row
    stopped            status, reason
"""

from __future__ import annotations

import json
import os
import threading
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

JOURNAL_NAME = "journal.jsonl"


@dataclass
class JournalState:
    """What the journal says about a run so far."""

    events: list[dict[str, Any]] = field(default_factory=list)
    torn_tail: bool = False

    def steps_done(self) -> set[int]:
        return {int(e["index"]) for e in self.events if e.get("event") == "step-done"}

    def committed_serials(self) -> list[str]:
        return [str(e["serial"]) for e in self.events if e.get("event") == "device-committed"]

    def last(self, event: str) -> dict[str, Any] | None:
        for entry in reversed(self.events):
            if entry.get("event") == event:
                return entry
        return None

    def count(self, event: str) -> int:
        return sum(1 for e in self.events if e.get("event") == event)


def read_journal(path: Path) -> JournalState:
    """Every whole line of the journal; a torn last line is noted, not fatal."""
    state = JournalState()
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return state
    lines = data.split(b"\n")
    if lines and lines[-1] == b"":
        lines.pop()
    elif lines:
        state.torn_tail = True  # the last line has no line end: the kill came mid-write
        lines.pop()
    for raw in lines:
        try:
            entry = json.loads(raw)
        except (json.JSONDecodeError, UnicodeDecodeError):
            state.torn_tail = True
            continue
        if isinstance(entry, dict):
            state.events.append(entry)
    return state


class RunJournal:
    """Appends events to ``folder/journal.jsonl``; each line is on disk before it returns."""

    def __init__(self, folder: Path) -> None:
        self.path = folder / JOURNAL_NAME
        folder.mkdir(parents=True, exist_ok=True)
        self._cut_torn_tail()
        self._stream = open(self.path, "ab")
        self._lock = threading.Lock()

    def _cut_torn_tail(self) -> None:
        if not self.path.exists():
            return
        data = self.path.read_bytes()
        keep = data.rfind(b"\n") + 1
        if keep != len(data):
            with open(self.path, "r+b") as stream:
                stream.truncate(keep)
                stream.flush()
                os.fsync(stream.fileno())

    def write(self, event: str, **fields: Any) -> None:
        entry = {"event": event, "utc": datetime.now(UTC).isoformat(timespec="milliseconds"), **fields}
        line = json.dumps(entry, sort_keys=False).encode("utf-8") + b"\n"
        with self._lock:
            self._stream.write(line)
            self._stream.flush()
            os.fsync(self._stream.fileno())

    def close(self) -> None:
        with self._lock:
            self._stream.close()
