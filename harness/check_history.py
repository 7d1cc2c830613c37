"""A check standard's history, kept per station, analyzer, check standard and figure, and
its control chart (:mod:`lineproof.control_chart`).

A figure is one band's mean |Γ| of the check standard (``"70cm mean |Γ|"``): each
verification adds one point per band -- the mean of its repeats, their standard deviation,
the reference, En, the temperature, and what the chart said of it (``signals``: NULL while
the point belongs to the baseline, ``""`` in control, else the rules it broke) and the
calibration it was made with.  The chart of a history is recomputed from its rows (the first
check of each of the first K calibrations sets the limits), so it never disagrees with the
records.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from lineproof.control_chart import (
    FAILING_SIGNALS,
    Baseline,
    ChartPoint,
    PointJudgement,
    baseline_indices,
    judge_series,
    occasions,
)
from lineproof.store import ResultStore
from lineproof.values import VerificationResult


def figure_name(band: str) -> str:
    """The history's name for a band's figure."""
    return f"{band} mean |Γ|"


@dataclass(frozen=True)
class HistoryKey:
    station: str
    analyzer: str
    check_standard: str
    figure: str

    def describe(self) -> str:
        return f"{self.check_standard}, {self.figure} -- {self.station}, {self.analyzer}"


def _points(rows: list[dict[str, Any]]) -> list[ChartPoint]:
    return [ChartPoint(float(r["value"]), None if r["std_dev"] is None else float(r["std_dev"]), int(r["repeats"]),
                       None if r["calibration_id"] is None else str(r["calibration_id"]))
            for r in rows]


def judge_new_points(store: ResultStore, station: str, analyzer: str, check_standard: str,
                     points: Mapping[str, ChartPoint], baseline_checks: int,
                     agrees: bool = True) -> dict[str, tuple[str, ...] | None]:
    """What each band's chart says of this check's point, judged after the history so far
    (None: the point is part of the baseline, or the baseline is not complete).  ``agrees``:
    the check agreed with its reference (a check that did not never joins the baseline)."""
    said = {}
    for band, point in points.items():
        rows = store.check_history(station, analyzer, check_standard, figure_name(band))
        usable = [*(bool(r["check_passed"]) for r in rows), agrees]
        _, judged = judge_series([*_points(rows), point], baseline_checks, usable=usable)
        said[band] = judged[-1].signals
    return said


def combined_signals(by_band: Mapping[str, tuple[str, ...] | None]) -> tuple[str, ...] | None:
    """One check's chart verdict over its bands: None if no band's chart is past its baseline."""
    if all(signals is None for signals in by_band.values()):
        return None
    return tuple(f"{band}: {signal}" for band, signals in by_band.items() for signal in (signals or ()))


def beyond_limits(by_band: Mapping[str, tuple[str, ...] | None]) -> bool:
    """A band's point lies beyond its control limits: the check fails (every other signal
    is a warning, see :mod:`lineproof.control_chart`)."""
    return any(signal in FAILING_SIGNALS for signals in by_band.values() for signal in (signals or ()))


def history_rows(result: VerificationResult, points: Mapping[str, ChartPoint],
                 said: Mapping[str, tuple[str, ...] | None], station: str, analyzer: str) -> list[dict[str, object]]:
    """The ``check_history`` rows a verification adds (one per band)."""
    bands = {b.name: b for b in result.bands}
    rows = []
    for band, point in points.items():
        signals = said.get(band)
        rows.append({
            "calibration_id": result.calibration_id, "station": station, "analyzer": analyzer,
            "check_standard": result.check_standard, "figure": figure_name(band), "measured_utc": result.measured_utc,
            "value": point.value, "std_dev": point.std_dev, "repeats": point.repeats,
            "reference": bands[band].reference_reflection, "en": bands[band].en,
            "temperature_c": result.temperature_c, "signals": None if signals is None else "; ".join(signals),
        })
    return rows


@dataclass
class ChartData:
    """A history with its chart: rows oldest first, the baseline (None while it is being
    built), and each point's judgement."""

    key: HistoryKey
    rows: list[dict[str, Any]]
    baseline: Baseline | None
    judged: list[PointJudgement]
    #: Per row: it is (or, while the baseline is being built, will be) a baseline point -- the
    #: first check that agreed of its calibration.
    in_baseline: list[bool] = field(default_factory=list)

    @property
    def baseline_count(self) -> int:
        return self.baseline.count if self.baseline is not None else len(self.rows)

    def category(self, index: int) -> str:
        """What the chart makes of row ``index``: ``baseline``, ``not judged`` (a later check of
        a calibration in the baseline, before the baseline was complete), ``left out`` (it
        disagreed with its reference), ``in control``, ``warning`` or ``failed``."""
        judged = self.judged[index]
        if judged.signals is None:
            if self.in_baseline[index]:
                return "baseline"
            return "not judged" if self.rows[index]["check_passed"] else "left out"
        if not judged.signals:
            return "in control"
        return "failed" if judged.fails else "warning"

    def status(self, index: int) -> str:
        """What the chart says of row ``index``, in a few words."""
        category = self.category(index)
        signals = "; ".join(self.judged[index].signals or ())
        return {"not judged": "not judged (its calibration's first check is in the baseline)",
                "left out": "left out (disagreed with its reference)",
                "warning": f"OUT, warning: {signals}", "failed": f"OUT, failed: {signals}"}.get(category, category)


def history_keys(store: ResultStore, station: str | None = None, check_standard: str | None = None,
                 figure: str | None = None) -> list[HistoryKey]:
    """Every history in the database (optionally of one station, check standard, figure)."""
    conditions, values = [], []
    for column, value in (("station", station), ("check_standard", check_standard)):
        if value:
            conditions.append(f"{column} = ?")
            values.append(value)
    if figure:
        conditions.append("(figure = ? OR figure = ?)")
        values += [figure, figure_name(figure)]
    where = f" WHERE {' AND '.join(conditions)}" if conditions else ""
    rows = store.query(f"SELECT DISTINCT station, analyzer, check_standard, figure FROM check_history{where}"
                       " ORDER BY station, analyzer, check_standard, figure", tuple(values))
    return [HistoryKey(*(str(v) for v in row)) for row in rows]


def load_chart(store: ResultStore, key: HistoryKey) -> ChartData:
    """A history and its chart.  The baseline is as long as it was when the points were
    judged (the calibrations of the usable rows before the first judged one); a history still
    building its baseline has no limits yet."""
    rows = store.check_history(key.station, key.analyzer, key.check_standard, key.figure)
    points = _points(rows)
    usable = [bool(r["check_passed"]) for r in rows]
    first_judged = next((i for i, r in enumerate(rows) if r["signals"] is not None), None)
    count = occasions(points[:first_judged], usable[:first_judged]) if first_judged is not None else 0
    chosen = set(baseline_indices(points, count if count >= 2 else len(points), usable))
    in_baseline = [i in chosen for i in range(len(rows))]
    if count < 2:
        return ChartData(key, rows, None, [PointJudgement(p, None) for p in points], in_baseline)
    baseline, judged = judge_series(points, count, usable=usable)
    return ChartData(key, rows, baseline, judged, in_baseline)
