"""``lineproof results``: find recorded devices (or runs) by run, serial, verdict and date."""

from __future__ import annotations

import argparse
import csv
import json
import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

from lineproof.errors import InputError
from lineproof.report_command import database_in
from lineproof.runner import DEFAULT_RECORDS, check_run_id
from lineproof.store import open_store

_DEVICE_COLUMNS = ("run_id", "position", "serial", "model", "measured_utc", "verdict", "touchstone")
_RUN_COLUMNS = ("run_id", "started_utc", "status", "sequence_name", "station", "operator", "devices", "failed",
                "indeterminate")


def _date(text: str | None, option: str, end: bool = False) -> str | None:
    """An ISO date or date-time as a UTC time stamp that compares with the records' own (a date
    alone given as the end of a range means the whole of that day)."""
    if text is None:
        return None
    try:
        moment = datetime.fromisoformat(text)
    except ValueError as exc:
        raise InputError(f"{text[:40]!r} is not a date", key=option,
                         fix="give a date such as 2026-03-01 or 2026-03-01T14:00 (UTC unless it says)") from exc
    if moment.tzinfo is not None:
        moment = moment.astimezone(UTC).replace(tzinfo=None)
    if end and len(text) <= 10:
        moment += timedelta(days=1)
    return moment.strftime("%Y-%m-%dT%H:%M:%S")


def _like(pattern: str) -> str:
    """A serial pattern with '*' wildcards as a SQL LIKE pattern (other characters literal)."""
    escaped = pattern.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")
    return escaped.replace("*", "%")


def query_devices(database: Path, arguments: argparse.Namespace) -> list[dict[str, Any]]:
    conditions, values = [], []
    if arguments.run:
        conditions.append("run_id = ?")
        values.append(check_run_id(arguments.run))
    if arguments.serial:
        conditions.append("serial LIKE ? ESCAPE '\\'")
        values.append(_like(arguments.serial))
    if arguments.verdict:
        conditions.append("verdict = ?")
        values.append(arguments.verdict)
    for option, column, end in (("since", ">=", False), ("until", "<", True)):
        bound = _date(getattr(arguments, option), f"--{option}", end)
        if bound is not None:
            conditions.append(f"measured_utc {column} ?")
            values.append(bound)
    where = f" WHERE {' AND '.join(conditions)}" if conditions else ""
    with open_store(database) as store:
        return store.rows(f"SELECT {', '.join(_DEVICE_COLUMNS)} FROM devices{where} ORDER BY measured_utc, position",
                          tuple(values))


def query_runs(database: Path) -> list[dict[str, Any]]:
    with open_store(database) as store:
        return store.rows(
            "SELECT r.run_id, r.started_utc, r.status, r.sequence_name, r.station, r.operator,"
            " COUNT(d.device_row) AS devices, SUM(CASE WHEN d.verdict = 'fail' THEN 1 ELSE 0 END) AS failed,"
            " SUM(CASE WHEN d.verdict = 'indeterminate' THEN 1 ELSE 0 END) AS indeterminate"
            " FROM runs r LEFT JOIN devices d ON d.run_id = r.run_id GROUP BY r.run_id ORDER BY r.started_utc")


def _print(rows: list[dict[str, Any]], columns: tuple[str, ...], form: str) -> None:
    if form == "json":
        print(json.dumps(rows, indent=2))
        return
    if form == "csv":
        writer = csv.writer(sys.stdout, lineterminator="\n")
        writer.writerow(columns)
        for row in rows:
            writer.writerow([row[c] for c in columns])
        return
    widths = [max([len(c)] + [len(str(r[c] if r[c] is not None else "")) for r in rows]) for c in columns]
    print("  ".join(c.ljust(w) for c, w in zip(columns, widths, strict=True)))
    for row in rows:
        print("  ".join(str(row[c] if row[c] is not None else "").ljust(w) for c, w in zip(columns, widths, strict=True)))
    print(f"({len(rows)} {'run' if columns == _RUN_COLUMNS else 'device'}{'s' if len(rows) != 1 else ''})")


def _command(arguments: argparse.Namespace) -> int:
    database = database_in(Path(arguments.records))
    form = "json" if arguments.json else "csv" if arguments.csv else "table"
    if arguments.runs:
        _print(query_runs(database), _RUN_COLUMNS, form)
    else:
        _print(query_devices(database, arguments), _DEVICE_COLUMNS, form)
    return 0


def register(commands: argparse._SubParsersAction) -> None:
    """Add ``lineproof results`` to the command line."""
    results = commands.add_parser(
        "results", help="find recorded devices by run, serial, verdict and date (or list runs)",
        description="Query the results database. Filters combine; a serial may hold * wildcards.",
    )
    results.add_argument("--records", default=str(DEFAULT_RECORDS), metavar="DIR",
                         help="the records folder (default: ./lineproof-records)")
    results.add_argument("--runs", action="store_true", help="list runs instead of devices")
    results.add_argument("--run", metavar="RUN_ID", help="devices of one run")
    results.add_argument("--serial", metavar="SERIAL", help="a serial number, * matches any characters")
    results.add_argument("--verdict", choices=("pass", "fail", "indeterminate"), help="devices with this verdict")
    results.add_argument("--since", metavar="DATE", help="measured on or after this UTC date (2026-03-01[T14:00])")
    results.add_argument("--until", metavar="DATE", help="measured before this UTC time, or on or before this date")
    form = results.add_mutually_exclusive_group()
    form.add_argument("--json", action="store_true", help="print JSON")
    form.add_argument("--csv", action="store_true", help="print CSV")
    results.set_defaults(handler=_command)
