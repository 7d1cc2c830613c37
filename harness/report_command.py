"""``lineproof report RUN_ID``: the HTML report, CSV and JSON summaries of one run."""

from __future__ import annotations

import argparse
from pathlib import Path

from lineproof.errors import InputError
from lineproof.report import ReportFiles, write_report
from lineproof.report_data import load_run_records
from lineproof.runner import DATABASE_NAME, DEFAULT_RECORDS, check_run_id
from lineproof.store import open_store


def database_in(records: Path) -> Path:
    """The results database of a records folder; InputError (nothing created) if there is none."""
    database = records / DATABASE_NAME
    if not database.is_file():
        raise InputError("no results database here", path=str(database),
                         fix="give the records folder a run wrote to with --records DIR")
    return database


def make_report(run_id: str, records: Path, out: Path | None = None) -> ReportFiles:
    """Write the report of ``run_id`` (by default into the run's own folder)."""
    check_run_id(run_id)
    with open_store(database_in(records)) as store:
        run_records = load_run_records(store, run_id)
    return write_report(run_records, out or records / "runs" / run_id)


def _command(arguments: argparse.Namespace) -> int:
    files = make_report(arguments.run_id, Path(arguments.records), Path(arguments.out) if arguments.out else None)
    print(f"report: {files.html}")
    print(f"summaries: {files.csv}, {files.json}")
    return 0


def register(commands: argparse._SubParsersAction) -> None:
    """Add ``lineproof report`` to the command line."""
    report = commands.add_parser(
        "report", help="write the HTML report and CSV/JSON summaries of a run",
        description="Read a run's records (database rows and Touchstone files) and write report.html with "
        "embedded plots, summary.csv (one row per device and band) and summary.json.",
    )
    report.add_argument("run_id", metavar="RUN_ID", help="the run, as lineproof run printed it")
    report.add_argument("--records", default=str(DEFAULT_RECORDS), metavar="DIR",
                        help="the records folder the run wrote to (default: ./lineproof-records)")
    report.add_argument("--out", metavar="DIR", help="where to write the report (default: the run's folder)")
    report.set_defaults(handler=_command)
