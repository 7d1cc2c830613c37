"""Run reports: a self-contained HTML page (tables and embedded PNG plots), a CSV with one row
per device and band, and a JSON summary -- all read back from the records of one run.

Every piece of user text is HTML-escaped; CSV text cells that a spreadsheet would read as a
formula are prefixed with an apostrophe (OWASP, "CSV Injection").
"""

from __future__ import annotations

import base64
import csv
import html
import io
import json
import math
import os
import tempfile
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from lineproof import __version__
from lineproof.check_history import ChartData
from lineproof.figures import FIGURES, INPUT_MATCH, INSERTION_LOSS, OUTPUT_MATCH
from lineproof.metrics import vswr_from_reflection
from lineproof.report_data import DeviceRecord, RunRecords
from lineproof.report_plots import control_chart_plot, device_plot, insertion_loss_plot, overlay_plot
from lineproof.touchstone import make_readable

_STYLE = """
body { font-family: system-ui, sans-serif; margin: 2em auto; max-width: 62em; color: #222; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; margin-top: 2em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; margin: 0.5em 0; font-size: 0.9em; }
th, td { border: 1px solid #ccc; padding: 0.25em 0.6em; text-align: left; vertical-align: top; }
th { background: #f0f3f7; } td.num { text-align: right; font-variant-numeric: tabular-nums; }
.pass { color: #2a7d2a; font-weight: 600; } .fail { color: #c0392b; font-weight: 600; }
.indeterminate { color: #d68910; font-weight: 600; } .note { color: #555; font-size: 0.9em; }
img { max-width: 100%; } dl { display: grid; grid-template-columns: max-content auto; gap: 0.2em 1em; }
dt { font-weight: 600; }
"""


@dataclass(frozen=True)
class ReportFiles:
    html: Path
    csv: Path
    json: Path


def _e(value: object) -> str:
    return html.escape("" if value is None else str(value))


def _verdict(value: object) -> str:
    text = _e(value)
    return f'<span class="{text}">{text}</span>'


def _number(value: object, digits: int = 4) -> str:
    if value is None:
        return ""
    number = float(value)  # type: ignore[arg-type]
    return "none" if math.isinf(number) else f"{number:.{digits}f}"


def _finite(value: Any) -> Any:
    """JSON has no infinity: a limit a band does not set (inf) is written as null."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_finite(v) for v in value]
    return value


def _table(headers: Sequence[str], rows: Iterable[Sequence[str]], numeric: frozenset[int] = frozenset()) -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in headers)
    body = "".join(
        "<tr>" + "".join(f'<td class="num">{cell}</td>' if i in numeric else f"<td>{cell}</td>"
                         for i, cell in enumerate(row)) + "</tr>"
        for row in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _image(png: bytes, alt: str) -> str:
    return f'<img alt="{_e(alt)}" src="data:image/png;base64,{base64.b64encode(png).decode("ascii")}">'


def _run_section(records: RunRecords) -> str:
    run, counts = records.run, records.counts
    items = [
        ("run", run["run_id"]), ("status", run["status"] + (f" ({run['status_reason']})" if run.get("status_reason") else "")),
        ("sequence", run["sequence_name"]), ("sequence SHA-256", run.get("sequence_sha256")),
        ("station", run["station"]), _operator_item(records),
        ("analyzer", f"{run['analyzer']} at {run['resource']} (profile {run.get('analyzer_profile')})"),
        ("sweep", run["sweep_plan"]), ("reference plane", run.get("reference_plane")),
        ("decision rule", run.get("decision_rule")), ("started / finished (UTC)", f"{run['started_utc']} / {run.get('finished_utc') or '-'}"),
        ("devices", f"{counts['total']}: {counts['pass']} passed, {counts['fail']} failed, "
                    f"{counts['indeterminate']} indeterminate"
                    + (f"; {counts['suspect']} SUSPECT (see below)" if counts["suspect"] else "")),
    ]
    if run.get("remeasure_of"):
        items.append(("measures again", f"the suspect results of run {run['remeasure_of']}"))
    first = next((d.metadata for d in records.devices if d.metadata), {})
    if "figures.judged" in first:
        judged = first["figures.judged"] + (f" (as-terminated {first['figures.as_terminated']})"
                                            if "figures.as_terminated" in first else "")
        items.append(("verdicts on", judged))
    return "<dl>" + "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in items) + "</dl>"


def _operator_item(records: RunRecords) -> tuple[str, str]:
    """Who measured: a repeatability study's operators (its readings name them), else the
    run's operator."""
    started_by = str(records.run["operator"])
    names = list(dict.fromkeys(str(r["operator"]) for r in records.study_readings))
    if not names:
        return "operator", started_by
    return "operators (the study's)", ", ".join(names) + ("" if started_by in names else f"; run started by {started_by}")


def _verdict_table(records: RunRecords) -> str:
    rows = []
    for device in records.devices:
        for index, band in enumerate(device.bands):
            first = index == 0
            rows.append([
                _e(device.row["position"]) if first else "", _e(device.serial) if first else "",
                _e(device.row["model"]) if first else "", _e(band["band"]), *_headline_cells(device, band),
                _verdict(band["verdict"]),
                _verdict(device.row["verdict"]) if first else "",
                _suspect_note(records, device) if first else "",
            ])
    headers = ["#", "serial", "model", "band", "worst VSWR", "at MHz", "limit", "U(|Γ|), k=2", "band", "device",
               "note"]
    return _table(headers, rows, frozenset({0, 4, 5, 6, 7}))


def _headline_cells(device: DeviceRecord, band: dict[str, Any]) -> list[str]:
    """Worst, where, limit and U of the band's headline: VSWR, or -- transmission-only data --
    insertion loss in dB."""
    if band.get("worst_vswr") is not None:
        return [_number(band["worst_vswr"]), _number(band["worst_frequency_hz"] / 1e6, 3),
                _number(band["limit_vswr"], 3), _number(band["expanded_uncertainty"], 5)]
    loss = device.figure(str(band["band"]), INSERTION_LOSS)
    at = loss.get("worst_frequency")
    return [f"IL {_number(loss.get('worst'), 3)} dB", "" if at is None else _number(at / 1e6, 3),
            f"{_number(loss.get('limit'), 3)} dB", f"{_number(loss.get('expanded_uncertainty'), 3)} dB"]


def _suspect_note(records: RunRecords, device: DeviceRecord) -> str:
    if not device.row.get("suspect"):
        return ""
    again = records.remeasured.get(device.serial)
    later = f" (measured again in {_e(again[0])}: {_verdict(again[1])})" if again else ""
    return f'<span class="fail">SUSPECT</span>{later}'


def _suspect_section(records: RunRecords) -> str:
    suspect = [d for d in records.devices if d.row.get("suspect")]
    if not suspect:
        return ""
    rows = [[_e(d.row["position"]), _e(d.serial), _verdict(d.row["verdict"]), _e(d.row.get("suspect_reason")),
             _suspect_note(records, d)] for d in suspect]
    left = sum(1 for d in suspect if d.serial not in records.remeasured)
    command = f"<code>lineproof run --remeasure-suspect {_e(records.run['run_id'])}</code>"
    if left == 0:
        again = "All of them have been measured again (see \"now\")."
    elif left < len(suspect):
        again = f"{len(suspect) - left} of them have been measured again (see \"now\"); measure the rest with {command}."
    else:
        again = f"Measure them again with {command}."
    return ("<h2>Suspect results</h2><p class='note'>A check of the calibration failed after these devices were "
            "measured and before any later passing check: their results are in doubt. Their files are unchanged; "
            f"a note beside each (<code>.suspect.json</code>) says so. {again}</p>"
            + _table(["#", "serial", "verdict", "why", "now"], rows, frozenset({0})))


def _study_section(records: RunRecords) -> str:
    if not records.study:
        return ""
    first = records.study[0]
    rows = [[_e(s["band"]), _e(s["figure"]), _number(s["repeatability_sd"], 5), _number(s["reproducibility_sd"], 5),
             _number(s["gauge_sd"], 5), _number(s["part_sd"], 5), _number(s["tolerance"], 3),
             f"{100 * s['repeatability_share']:.1f} %", f"{100 * s['reproducibility_share']:.1f} %",
             f"{100 * s['gauge_share']:.1f} %"] for s in records.study]
    headers = ["band", "figure", "repeatability σ", "reproducibility σ", "GR&R σ", "devices σ", "tolerance",
               "repeatability", "reproducibility", "GR&R"]
    return (f"<h2>Repeatability study</h2><p class='note'>{_e(first['devices'])} devices x "
            f"{_e(first['reconnections'])} connections x {_e(first['operators'])} operator(s); "
            f"{len(records.study_readings)} readings. Method: {_e(first['method'])}. The last three columns are "
            "shares of the tolerance (the band's VSWR limit - 1).</p>"
            + _table(headers, rows, frozenset(range(2, 10))))


_VERDICT_NAMES = {1.0: "pass", 0.0: "indeterminate", -1.0: "fail"}


def _figure_cells(name: str, values: dict[str, float | None]) -> list[str]:
    """worst, at MHz, U, limit, verdict of one recorded figure (VSWR for a match, dB for loss)."""
    def shown(key: str, digits: int) -> str:
        value = values.get(key)
        if value is None:
            return ""
        return _number(value, digits) if name == INSERTION_LOSS or key == "expanded_uncertainty" else \
            _number(float(vswr_from_reflection(value)), digits)
    verdict = values.get("verdict")
    at = values.get("worst_frequency")
    return [shown("worst", 4), "" if at is None else _number(at / 1e6, 3), shown("expanded_uncertainty", 4 if name ==
            INSERTION_LOSS else 5), shown("limit", 3), _verdict(_VERDICT_NAMES[verdict]) if verdict is not None
            else "<span class='note'>reported</span>"]


def _figures_table(records: RunRecords) -> str:
    """Every figure of every band of the two-port records (empty for a one-port run)."""
    rows = []
    for device in records.devices:
        for band in device.bands:
            for name in FIGURES:
                values = device.figure(str(band["band"]), name)
                if values:
                    rows.append([_e(device.serial), _e(band["band"]), _e(name), *_figure_cells(name, values)])
    if not rows:
        return ""
    headers = ["serial", "band", "figure", "worst (VSWR or dB)", "at MHz", "U, k=2 (|Γ| or dB)", "limit", "verdict"]
    note = ("<p class='note'>Match figures as VSWR and U of |Γ|; insertion loss and its U in dB. "
            "'reported' figures are shown beside the judged ones.</p>")
    return "<h2>Figures</h2>" + note + _table(headers, rows, frozenset({3, 4, 5, 6}))


def _plus_minus(value: object, u: object, digits: int, scale: float = 1.0) -> str:
    if value is None:
        return ""
    text = _number(float(value) * scale, digits)  # type: ignore[arg-type]
    return text if u is None else f"{text} ± {_number(float(u) * scale, digits)}"  # type: ignore[arg-type]


def _markers_section(records: RunRecords) -> str:
    """Each device's readings at the sequence's markers, and its group delay per band."""
    rows = [[_e(d.serial), _e(m["marker"]), _number(m["frequency_hz"] / 1e6, 3), _e(m.get("figure") or ""),
             _number(m.get("vswr")), _plus_minus(m.get("expanded_uncertainty"), None, 5),
             _plus_minus(m.get("insertion_loss_db"), m.get("insertion_loss_expanded_uncertainty_db"), 3),
             _plus_minus(m.get("phase_deg"), m.get("phase_expanded_uncertainty_deg"), 2),
             _plus_minus(m.get("group_delay_s"), m.get("group_delay_expanded_uncertainty_s"), 3, 1e9)]
            for d in records.devices for m in d.markers]
    delays = [[_e(d.serial), _e(band["band"]), _number(values["group_delay.min"][0] * 1e9, 3),
               _number(values["group_delay.max"][0] * 1e9, 3)]
              for d in records.devices for band in d.bands
              if "group_delay.min" in (values := d.metrics.get(str(band["band"]), {}))]
    parts = []
    if rows:
        parts.append("<h2>Markers</h2><p class='note'>Read at the sweep point nearest each marker: the headline match "
                     "figure, insertion loss, the phase of S21 and its group delay, each ± its expanded uncertainty "
                     "(k = 2; the group delay's from the phase's at the neighbouring points, a bound).</p>"
                     + _table(["serial", "marker", "MHz", "figure", "VSWR", "U(|Γ|)", "IL (dB)", "phase (°)",
                               "group delay (ns)"], rows, frozenset({2, 4, 5, 6, 7, 8})))
    if delays:
        parts.append("<h2>Group delay</h2>" + _table(["serial", "band", "smallest (ns)", "largest (ns)"], delays,
                                                     frozenset({2, 3})))
    return "".join(parts)


def _calibration_section(records: RunRecords) -> str:
    calibrations = _table(
        ["calibration", "made (UTC)", "method", "kit", "analyzer", "sweep"],
        ([_e(c["calibration_id"]), _e(c["created_utc"]), _e(c["method"]), _e(f"{c['kit_name']} ({c['kit_sha256'][:12]})"),
          _e(c["analyzer"]), _e(f"{c['start_hz'] / 1e6:g}-{c['stop_hz'] / 1e6:g} MHz, {c['points']} points")]
         for c in records.calibrations))
    qualifications = _table(
        ["termination", "measured (UTC)", "calibration", "worst VSWR", "at MHz", "limit", "result"],
        ([_e(q["termination"]), _e(q["measured_utc"]), _e(q["calibration_id"]), _number(q["worst_vswr"]),
          _number(q["worst_frequency_hz"] / 1e6, 3), _number(q["limit_vswr"], 3),
          _verdict("pass" if q["passed"] else "fail")] for q in records.qualifications),
        frozenset({3, 4, 5}))
    return f"<h2>Calibration</h2>{calibrations}<h2>Termination qualification</h2>{qualifications}"


def _verification_section(records: RunRecords) -> str:
    if not records.verifications:
        return "<h2>Verification</h2><p class='note'>This sequence has no check-standard verification.</p>"
    rows = []
    for check in records.verifications:
        bands = records.verification_bands.get(int(check["verification_id"]), [])
        per_band = "; ".join(f"{b['band']}: |Γ| {b['measured_reflection']:.4f} vs {b['reference_reflection']:.4f}"
                             + ("" if b.get("en") is None else f" ± {b['tolerance']:.4f}, En {b['en']:.2f}")
                             for b in bands)
        out = "OUT, failed" if not check["passed"] else "OUT, warning -- the calibration is made again"
        chart = {None: "not judged (baseline)", 1: "in control",
                 0: f"{out}: {check.get('control_signals')}"}[check.get("in_control")]
        rows.append([_e(check["measured_utc"]), _e(check["devices_before"]), _e(check["check_standard"]),
                     _number(check["worst_deviation"], 5), _number(check.get("en"), 2), _e(chart),
                     _verdict("pass" if check["passed"] else "fail"), _e(per_band)])
    headers = ["measured (UTC)", "after devices", "check standard", "largest |Δ|Γ||", "En", "control chart",
               "result", "per band (mean |Γ| vs reference)"]
    criteria = sorted({str(c["criterion"]) for c in records.verifications if c.get("criterion")})
    note = f"<p class='note'>Criterion: {_e('; '.join(criteria))}.</p>" if criteria else ""
    return "<h2>Verification</h2>" + note + _table(headers, rows, frozenset({1, 3, 4})) + _charts_section(records)


def _charts_section(records: RunRecords) -> str:
    if not records.charts:
        return ""
    parts = ["<h2>Control charts</h2><p class='note'>Each check standard's history on this station and analyzer "
             "(NIST/SEMATECH e-Handbook of Statistical Methods, §2.3.5.2 and §2.2.3.1): the first agreeing check of "
             "each of the first K calibrations sets the accepted value and the limits ±t(1-α/2; K-1)·s "
             "(α = 0.0027); a check beyond them fails. The shaded zones at 1 s and 2 s serve the run rules that "
             "catch slow drift (Western Electric 1956: 2 of 3 beyond 2 s, 4 of 5 beyond 1 s, 8 on one side; "
             "Nelson 1984: 6 rising or falling), judged on one check per calibration -- checks made with one "
             "calibration share its error. Below, the standard deviation of each check's repeats against "
             "s1·sqrt(F). A run rule or the precision chart warns: the calibration is made again, no result is "
             "put in doubt.</p>"]
    for chart in records.charts:
        if chart.baseline is None:
            parts.append(f"<p class='note'>{_e(chart.key.describe())}: {len(chart.rows)} check(s) so far; the "
                         "limits are set once the baseline is complete.</p>")
        parts.append(_image(control_chart_plot(chart), f"control chart of {chart.key.describe()}"))
    return "".join(parts)


def _plots_section(records: RunRecords) -> str:
    parts = ["<h2>Batch overlay</h2>"]
    readable = [d for d in records.devices if d.reflection is not None]
    if readable:
        parts.append(_image(overlay_plot(readable, records.band_limits), "VSWR of every device"))
    parts.append("<h2>Devices</h2>")
    for device in records.devices:
        if device.problem is not None or device.frequencies_hz is None:
            parts.append(f"<p class='note'>{_e(device.serial)}: {_e(device.problem)}</p>")
            continue
        if device.reflection is not None:  # none in a transmission-only record
            parts.append(_image(device_plot(device, records.band_limits), f"VSWR of {device.serial}"))
        if device.s_parameters is not None:
            parts.append(_image(insertion_loss_plot(device, records.band_limits), f"insertion loss of {device.serial}"))
        if device.uncertainty is None:
            parts.append(f"<p class='note'>{_e(device.serial)}: uncertainty not evaluated (simple acceptance).</p>")
    return "".join(parts)


def render_html(records: RunRecords) -> str:
    run_id = records.run["run_id"]
    return (
        f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>lineproof report {_e(run_id)}</title>"
        f"<style>{_STYLE}</style></head><body><h1>Run report: {_e(records.run['sequence_name'])}</h1>"
        f"{_run_section(records)}{_study_section(records)}<h2>Verdicts</h2>{_verdict_table(records)}"
        f"{_figures_table(records)}{_markers_section(records)}{_suspect_section(records)}"
        f"{_calibration_section(records)}"
        f"{_verification_section(records)}{_plots_section(records)}"
        f"<p class='note'>Written by lineproof {_e(__version__)} from the run's records.</p></body></html>"
    )


def _safe_cell(value: object) -> object:
    if isinstance(value, str) and value[:1] in ("=", "+", "-", "@", "\t", "\r"):
        return "'" + value
    return value


def render_csv(records: RunRecords) -> str:
    stream = io.StringIO()
    writer = csv.writer(stream, lineterminator="\n")
    writer.writerow(["run_id", "position", "serial", "model", "measured_utc", "device_verdict", "band", "start_hz",
                     "stop_hz", "limit_vswr", "worst_vswr", "worst_frequency_hz", "mean_vswr", "worst_return_loss_db",
                     "expanded_uncertainty", "band_verdict", "decision_rule", "calibration_id", "touchstone",
                     "figure", "input_match_worst_vswr", "output_match_worst_vswr", "insertion_loss_worst_db",
                     "insertion_loss_limit_db", "insertion_loss_expanded_uncertainty_db", "insertion_loss_verdict",
                     "suspect", "suspect_reason"])
    for device in records.devices:
        row = device.row
        for band in device.bands:
            writer.writerow([_safe_cell(v) for v in (
                row["run_id"], row["position"], row["serial"], row["model"], row["measured_utc"], row["verdict"],
                band["band"], band["start_hz"], band["stop_hz"], band["limit_vswr"], band["worst_vswr"],
                band["worst_frequency_hz"], band["mean_vswr"], band["worst_return_loss_db"],
                band["expanded_uncertainty"], band["verdict"], band["decision_rule"], row["calibration_id"],
                row["touchstone"], device.metadata.get("figure", ""), *_two_port_cells(device, str(band["band"])),
                int(bool(row.get("suspect"))), row.get("suspect_reason") or "")])
    return stream.getvalue()


def _two_port_cells(device: DeviceRecord, band: str) -> list[object]:
    def vswr(name: str) -> object:
        worst = device.figure(band, name).get("worst")
        return "" if worst is None else round(float(vswr_from_reflection(worst)), 5)

    loss = device.figure(band, INSERTION_LOSS)
    verdict = loss.get("verdict")
    return [vswr(INPUT_MATCH), vswr(OUTPUT_MATCH), loss.get("worst", ""), loss.get("limit", ""),
            loss.get("expanded_uncertainty", ""), "" if verdict is None else _VERDICT_NAMES[verdict]]


def _device_json(device: DeviceRecord) -> dict[str, Any]:
    row = device.row
    return {
        "position": row["position"], "serial": row["serial"], "model": row["model"], "verdict": row["verdict"],
        "measured_utc": row["measured_utc"], "touchstone": row["touchstone"], "file_sha256": row["file_sha256"],
        "calibration_id": row["calibration_id"], "suspect": bool(row.get("suspect")),
        "suspect_reason": row.get("suspect_reason"), "suspect_verification_id": row.get("suspect_verification_id"),
        "figure": device.metadata.get("figure"),
        "bands": [{**{k: b[k] for k in ("band", "start_hz", "stop_hz", "limit_vswr", "worst_vswr", "worst_frequency_hz",
                                        "mean_vswr", "worst_return_loss_db", "expanded_uncertainty", "verdict")},
                   "figures": {name: _figure_json(device.figure(str(b["band"]), name)) for name in FIGURES
                               if device.figure(str(b["band"]), name)}}
                  for b in device.bands],
    }


def _chart_json(chart: ChartData) -> dict[str, Any]:
    base = chart.baseline
    return {
        "station": chart.key.station, "analyzer": chart.key.analyzer, "check_standard": chart.key.check_standard,
        "figure": chart.key.figure, "checks": len(chart.rows),
        "baseline": None if base is None else {
            "count": base.count, "accepted_value": base.center, "process_std": base.process_std,
            "limit_factor": base.limit_factor, "lower": base.lower, "upper": base.upper,
            "pooled_std": base.pooled_std, "pooled_dof": base.pooled_dof},
        "last": None if not chart.rows else {"measured_utc": chart.rows[-1]["measured_utc"],
                                             "value": chart.rows[-1]["value"], "signals": chart.rows[-1]["signals"]},
    }


def _figure_json(values: dict[str, float | None]) -> dict[str, object]:
    found: dict[str, object] = {k: v for k, v in values.items() if k != "verdict"}
    verdict = values.get("verdict")
    found["verdict"] = "reported" if verdict is None else _VERDICT_NAMES[verdict]
    return found


def render_json(records: RunRecords) -> str:
    def plain(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
        return [{k: v for k, v in r.items() if not isinstance(v, bytes)} for r in rows]

    summary = {
        "software": f"lineproof {__version__}", "run": plain([records.run])[0], "counts": records.counts,
        "calibrations": plain(records.calibrations), "qualifications": plain(records.qualifications),
        "verifications": [{**plain([c])[0], "bands": plain(records.verification_bands.get(int(c["verification_id"]), []))}
                          for c in records.verifications],
        "devices": [_device_json(d) for d in records.devices],
        "remeasured": {serial: {"run_id": run, "verdict": verdict} for serial, (run, verdict) in records.remeasured.items()},
        "control_charts": [_chart_json(c) for c in records.charts],
    }
    if records.study:
        summary["repeatability_study"] = {"results": plain(records.study), "readings": records.study_readings}
    return json.dumps(_finite(summary), indent=2)


def _replace_file(path: Path, text: str) -> None:
    """Write a derived file atomically (a report may replace an older report of the same run)."""
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=".partial-", suffix=path.suffix)
    try:
        make_readable(handle)
        with os.fdopen(handle, "w", encoding="utf-8", newline="\n") as stream:
            stream.write(text)
            stream.flush()
            os.fsync(stream.fileno())
        os.replace(temporary, path)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise


def write_report(records: RunRecords, folder: Path) -> ReportFiles:
    """``report.html``, ``summary.csv`` and ``summary.json`` in ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    files = ReportFiles(folder / "report.html", folder / "summary.csv", folder / "summary.json")
    _replace_file(files.html, render_html(records))
    _replace_file(files.csv, render_csv(records))
    _replace_file(files.json, render_json(records))
    return files
