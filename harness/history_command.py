"""``lineproof history``: a check standard's history and its control chart, as a text table and
a plot file.

Every verification adds one point per band to the history of its station, analyzer, check
standard and figure (see :mod:`lineproof.check_history`).  The table lists the points with
what the chart said of each; ``--plot FILE`` writes the chart (PNG), one file per history.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from lineproof.check_history import ChartData, history_keys, load_chart
from lineproof.errors import InputError
from lineproof.report_command import database_in
from lineproof.runner import DEFAULT_RECORDS
from lineproof.store import open_store


def _rows(chart: ChartData) -> list[dict[str, Any]]:
    return [{
        "number": number, "measured_utc": row["measured_utc"], "run_id": row["run_id"],
        "calibration_id": row["calibration_id"], "value": row["value"], "std_dev": row["std_dev"],
        "repeats": row["repeats"], "reference": row["reference"], "en": row["en"],
        "temperature_c": row["temperature_c"], "status": chart.status(number - 1),
    } for number, row in enumerate(chart.rows, 1)]


def _number(value: object, digits: int) -> str:
    return "-" if value is None else f"{float(value):.{digits}f}"  # type: ignore[arg-type]


def _print_chart(chart: ChartData) -> None:
    key, base = chart.key, chart.baseline
    print(f"check standard {key.check_standard}, {key.figure}")
    print(f"  station {key.station}; analyzer {key.analyzer}")
    if base is None:
        print(f"  {len(chart.rows)} check(s); the control limits are set once the baseline is complete")
    else:
        spread = "" if base.pooled_std is None else f", repeatability s1 {base.pooled_std:.6f} ({base.pooled_dof} dof)"
        print(f"  baseline of {base.count} checks: accepted value {base.center:.6f}, s {base.process_std:.6f}, "
              f"limits {base.lower:.6f} .. {base.upper:.6f} (±{base.limit_factor:.2f} s){spread}")
    header = f"  {'#':>3}  {'measured (UTC)':<25} {'value':>9} {'s':>9} {'En':>5} {'°C':>6}  status"
    print(header)
    print("  " + "-" * (len(header) + 10))
    for row in _rows(chart):
        print(f"  {row['number']:>3}  {row['measured_utc']:<25} {_number(row['value'], 6):>9} "
              f"{_number(row['std_dev'], 6):>9} {_number(row['en'], 2):>5} {_number(row['temperature_c'], 1):>6}  "
              f"{row['status']}")
    print()


def _plot_files(plot: Path, charts: list[ChartData]) -> list[Path]:
    from lineproof.report_plots import control_chart_plot

    plot.parent.mkdir(parents=True, exist_ok=True)
    written = []
    for index, chart in enumerate(charts, 1):
        path = plot if len(charts) == 1 else plot.with_name(f"{plot.stem}-{index}{plot.suffix or '.png'}")
        path.write_bytes(control_chart_plot(chart))
        written.append(path)
    return written


def _chart_json(chart: ChartData) -> dict[str, Any]:
    base = chart.baseline
    return {"station": chart.key.station, "analyzer": chart.key.analyzer, "check_standard": chart.key.check_standard,
            "figure": chart.key.figure,
            "baseline": None if base is None else {"count": base.count, "accepted_value": base.center,
                                                   "process_std": base.process_std, "lower": base.lower,
                                                   "upper": base.upper, "limit_factor": base.limit_factor,
                                                   "pooled_std": base.pooled_std, "pooled_dof": base.pooled_dof},
            "checks": _rows(chart)}


def _command(arguments: argparse.Namespace) -> int:
    database = database_in(Path(arguments.records))
    with open_store(database) as store:
        keys = history_keys(store, arguments.station, arguments.check_standard, arguments.figure)
        if not keys:
            raise InputError("no check-standard history matches", path=str(database),
                             fix="drop a filter, or run a sequence with a [check_standard] and a verify step first")
        charts = [load_chart(store, key) for key in keys]
    if arguments.json:
        print(json.dumps([_chart_json(c) for c in charts], indent=2, ensure_ascii=False))
    else:
        for chart in charts:
            _print_chart(chart)
    if arguments.plot:
        for path in _plot_files(Path(arguments.plot), charts):
            if not arguments.json:
                print(f"chart: {path}")
    return 0


def register(commands: argparse._SubParsersAction) -> None:
    """Add ``lineproof history`` to the command line."""
    history = commands.add_parser(
        "history", help="a check standard's history and control chart (table and plot)",
        description="List each check standard's verifications on each station and analyzer, with the control "
        "chart's accepted value, limits and what it said of every check; --plot writes the chart.",
    )
    history.add_argument("--records", default=str(DEFAULT_RECORDS), metavar="DIR",
                         help="the records folder (default: ./lineproof-records)")
    history.add_argument("--station", metavar="NAME", help="only this station")
    history.add_argument("--check-standard", metavar="NAME", help="only this check standard")
    history.add_argument("--figure", metavar="BAND", help="only this band's figure (e.g. 70cm)")
    history.add_argument("--plot", metavar="FILE", help="write the control chart as a PNG (one file per history)")
    history.add_argument("--json", action="store_true", help="print JSON")
    history.set_defaults(handler=_command)
