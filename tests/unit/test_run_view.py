"""What a line system reads of a run (`--json`): steps in pairs even when a run ends inside one."""

from __future__ import annotations

import io
import json

from lineproof.run_view import JsonRunView


def _events(out: io.StringIO) -> list[dict]:
    return [json.loads(line) for line in out.getvalue().splitlines()]


def test_a_step_the_run_ended_in_is_reported_failed_with_the_reason() -> None:
    out = io.StringIO()
    view = JsonRunView(out)
    view.step_started("calibrating (one-port, kit N50)")
    view.step_finished("calibrated")
    view.step_started("TM150-0003: connect and sweep")
    view.run_finished({"run_id": "run-x", "status": "failed", "reason": "link lost", "exit_code": 2})
    assert [(e["event"], e.get("step"), e.get("text", e.get("reason"))) for e in _events(out)] == [
        ("step-started", "calibrating (one-port, kit N50)", None),
        ("step-finished", "calibrating (one-port, kit N50)", "calibrated"),
        ("step-started", "TM150-0003: connect and sweep", None),
        ("step-failed", "TM150-0003: connect and sweep", "link lost"),
        ("run-finished", None, "link lost"),
    ]


def test_closing_on_an_error_fails_the_open_step_once() -> None:
    out = io.StringIO()
    view = JsonRunView(out)
    view.step_started("qualifying termination t")
    view.close("cannot write the records (disk full)")
    view.close("again")
    view.run_finished({"status": "failed", "reason": "x"})
    kinds = [(e["event"], e.get("reason")) for e in _events(out)]
    assert kinds == [("step-started", None), ("step-failed", "cannot write the records (disk full)"),
                     ("run-finished", "x")]
