"""``lineproof run SEQUENCE``: a whole run, with progress bars, live verdicts and prompts.

Exit codes (see :mod:`lineproof.cli`): 0 every device passed, 1 a device failed, was
indeterminate or is suspect, 2 the run could not complete (the reason is printed; ``--resume RUN_ID``
continues it), 3 invalid input (nothing was touched).  ``--json`` writes one JSON object per
event for a line system.  Ctrl-C stops between devices; a second Ctrl-C stops at once.
"""

from __future__ import annotations

import argparse
import json
import signal
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from lineproof.errors import InputError, LineproofError
from lineproof.run_steps import StopSignal
from lineproof.run_view import ConsoleRunView, JsonRunView, RunView
from lineproof.runner import RunOptions, resume_run, start_run
from lineproof.sequence import load_sequence


@contextmanager
def stop_on_ctrl_c(stop: StopSignal, view: RunView) -> Iterator[None]:
    """First Ctrl-C: finish the current device, then stop.  A second one, or one at a prompt:
    stop at once (the records stay whole either way)."""

    def handler(signum: int, frame: object) -> None:
        if stop.requested or stop.at_prompt:
            raise KeyboardInterrupt
        stop.requested = True
        view.note("Ctrl-C: stopping after the current device or step (press Ctrl-C again to stop at once)")

    try:
        previous = signal.signal(signal.SIGINT, handler)
    except ValueError:  # not the main thread (embedded use): Ctrl-C keeps its default meaning
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def problems_as_json(error: InputError) -> list[dict[str, object]]:
    items = getattr(error, "problems", None) or [error]  # a sequence's or a profile's every problem
    return [{"file": p.path, "line": p.line, "key": p.key, "problem": p.problem, "fix": p.fix} for p in items]


def _command(arguments: argparse.Namespace) -> int:
    view: RunView = JsonRunView() if arguments.json else ConsoleRunView()
    options = RunOptions(records=Path(arguments.records) if arguments.records else None,
                         operator=arguments.operator or "",
                         station_file=Path(arguments.station) if arguments.station else None)
    stop = StopSignal()
    try:
        if arguments.sequence is None and arguments.resume is None and arguments.remeasure_suspect is None:
            raise InputError("no sequence given", key="SEQUENCE",
                             fix="lineproof run SEQUENCE.toml, or lineproof run --resume RUN_ID")
        with stop_on_ctrl_c(stop, view):
            if arguments.remeasure_suspect is not None:
                if arguments.resume is not None or arguments.sequence or arguments.station:
                    raise InputError("--remeasure-suspect takes no sequence, --resume or --station",
                                     key="--remeasure-suspect",
                                     fix="lineproof run --remeasure-suspect RUN_ID [--records DIR]: the run's own "
                                     "sequence and station are used")
                from lineproof.remeasure import remeasure_suspect

                outcome = remeasure_suspect(arguments.remeasure_suspect, options, view, stop)
            elif arguments.resume is not None:
                if arguments.station:
                    raise InputError("--station cannot change the station of a run being resumed", key="--station",
                                     fix="resume without --station: the run continues on the station it began on")
                hint = load_sequence(arguments.sequence, options.station_file) if arguments.sequence else None
                outcome = resume_run(arguments.resume, options, view, stop, hint)
            else:
                spec = load_sequence(arguments.sequence, options.station_file)
                outcome = start_run(spec, options, view, stop)
    except InputError as exc:
        view.close(f"invalid input: {exc.problem}")
        if not arguments.json:
            raise
        from lineproof.cli import error_object

        print(error_object(problems_as_json(exc)), flush=True)
        return 3
    except (LineproofError, OSError) as exc:
        # An OSError here is the records' disk or folder (full, read-only, gone): the run is
        # marked failed where it could still be written, and it can be resumed.
        reason = str(exc) if isinstance(exc, LineproofError) else f"cannot write the records ({exc})"
        view.close(reason)
        if not arguments.json:
            print(f"lineproof: run could not complete: {reason}", file=sys.stderr)
            return 2
        print(json.dumps({"event": "error", "kind": "could-not-complete", "exit_code": 2, "reason": reason}),
              flush=True)
        return 2
    summary = outcome.summary()
    if outcome.status == "complete":
        summary["report_command"] = f"lineproof report {outcome.run_id} --records {outcome.records}"
    view.run_finished(summary)
    if outcome.status != "complete" and not arguments.json:
        print(f"lineproof: run did not complete ({outcome.status}): {outcome.reason}", file=sys.stderr)
    return outcome.exit_code


def register(commands: argparse._SubParsersAction) -> None:
    """Add ``lineproof run`` to the command line."""
    run = commands.add_parser(
        "run", help="run a sequence: calibrate, qualify, verify, measure a batch, record",
        description="Check the sequence, open its station, carry out its steps and record every device "
        "(results database, Touchstone files with metadata, run journal).",
    )
    run.add_argument("sequence", nargs="?", metavar="SEQUENCE", help="the sequence file (.toml)")
    run.add_argument("--resume", metavar="RUN_ID", help="continue an interrupted run (no device lost or repeated)")
    run.add_argument("--remeasure-suspect", metavar="RUN_ID",
                     help="measure again the results a failed check made suspect in RUN_ID (a new run of its "
                     "sequence, its suspect devices only)")
    run.add_argument("--operator", metavar="NAME", help="who runs it, for the records (default: your login name)")
    run.add_argument("--station", metavar="FILE", help="a station file that replaces the sequence's [station]")
    run.add_argument("--records", metavar="DIR",
                     help="folder for the database and run folders (default: the sequence's [records] folder, "
                     "else ./lineproof-records)")
    run.add_argument("--json", action="store_true", help="one JSON object per event on standard output")
    run.set_defaults(handler=_command)
