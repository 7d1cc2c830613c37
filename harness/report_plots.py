"""Report plots, drawn with matplotlib's Agg renderer and returned as PNG bytes.

Figures are built as ``matplotlib.figure.Figure`` objects (not through pyplot), so no global
state or display is touched and plots can be drawn from any thread.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from typing import Any

import numpy as np

from lineproof import metrics
from lineproof.check_history import ChartData
from lineproof.control_chart import DEFAULT_PRECISION_ALPHA
from lineproof.report_data import DeviceRecord

_VERDICT_COLOURS = {"pass": "#2a7d2a", "fail": "#c0392b", "indeterminate": "#d68910"}


def _figure(width: float = 7.5, height: float = 3.2) -> Any:
    from matplotlib.figure import Figure

    figure = Figure(figsize=(width, height), dpi=100, layout="constrained")
    return figure, figure.add_subplot()


def _png(figure: Any) -> bytes:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(figure)
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png")
    return buffer.getvalue()


def _limits_and_scale(axes: Any, limits: Sequence[dict[str, Any]], top: float) -> None:
    """Shade each band and the region above its limit; frequency axis in MHz."""
    for band in limits:
        start, stop, limit = band["start_hz"] / 1e6, band["stop_hz"] / 1e6, band["limit_vswr"]
        axes.axvspan(start, stop, color="#dde8f5", zorder=0)
        axes.fill_between([start, stop], [limit, limit], [top, top], color="#f5c6c0", alpha=0.8, zorder=1, linewidth=0)
        axes.hlines(limit, start, stop, colors="#c0392b", linewidth=1.2, zorder=3)
        axes.annotate(f"{band['band']} ≤ {limit:g}", (start, limit), textcoords="offset points", xytext=(0, 3),
                      fontsize=8, color="#7b241c")
    axes.set_xlabel("frequency (MHz)")
    axes.set_ylabel("VSWR")
    axes.set_ylim(1.0, top)
    axes.grid(True, linewidth=0.4, alpha=0.6)


def _top(limits: Sequence[dict[str, Any]], curves: Sequence[np.ndarray]) -> float:
    highest_limit = max((float(b["limit_vswr"]) for b in limits), default=1.5)
    highest_curve = max((float(np.nanmax(c)) for c in curves if c.size), default=1.0)
    return min(max(highest_limit * 1.15, highest_curve * 1.05, 1.1), 3.0)


def device_plot(device: DeviceRecord, limits: Sequence[dict[str, Any]]) -> bytes:
    """VSWR against frequency for one device, with its bands' limits and, when it was
    evaluated, the expanded (k = 2) uncertainty as a band around the trace."""
    figure, axes = _figure()
    assert device.frequencies_hz is not None and device.reflection is not None
    f = device.frequencies_hz / 1e6
    magnitude = np.abs(device.reflection)
    vswr = metrics.vswr_from_reflection(magnitude)
    top = _top(limits, [vswr])
    _limits_and_scale(axes, limits, top)
    if device.uncertainty is not None and device.uncertainty.shape == magnitude.shape:
        low = metrics.vswr_from_reflection(np.clip(magnitude - device.uncertainty, 0.0, None))
        high = metrics.vswr_from_reflection(np.clip(magnitude + device.uncertainty, 0.0, 0.999))
        axes.fill_between(f, low, np.minimum(high, top), color="#7fb3d5", alpha=0.5, zorder=2,
                          label="expanded uncertainty (k = 2)")
    colour = _VERDICT_COLOURS.get(str(device.row["verdict"]), "#333333")
    headline = device.metadata.get("figure", "as-terminated input reflection")
    label = f"{device.serial} ({device.row['verdict']})" if device.s_parameters is None else headline
    axes.plot(f, vswr, color=colour, linewidth=1.4, zorder=4, label=label)
    if device.s_parameters is not None:  # the match figures reported beside, thinner
        for (i, name), style in zip(((0, "S11, ideal termination"), (1, "S22, ideal source")), ("--", ":"),
                                    strict=True):
            if not headline.startswith(name[:3]):
                axes.plot(f, np.minimum(metrics.vswr_from_reflection(np.abs(device.s_parameters[:, i, i])), top),
                          color="#555555", linewidth=0.9, linestyle=style, zorder=3, label=name)
    axes.set_title(f"{device.serial}: {device.row['model']}", fontsize=10)
    axes.legend(loc="upper left", fontsize=8)
    return _png(figure)


def insertion_loss_plot(device: DeviceRecord, limits: Sequence[dict[str, Any]]) -> bytes:
    """Insertion loss (dB) against frequency for a two-port record, with each band's limit
    shaded above it and the expanded uncertainty as a band around the trace."""
    figure, axes = _figure(height=2.6)
    assert device.frequencies_hz is not None and device.s_parameters is not None
    f = device.frequencies_hz / 1e6
    loss = metrics.insertion_loss_db(device.s_parameters[:, 1, 0])
    u = device.arrays.get("insertion-loss.expanded_uncertainty")
    band_limits = [(b, device.figure(str(b["band"]), "insertion-loss").get("limit")) for b in limits]
    top = max([float(np.nanmax(loss + (0 if u is None else u))) * 1.3]
              + [float(limit) * 1.3 for _, limit in band_limits if limit is not None] + [0.05])
    for band, limit in band_limits:
        start, stop = band["start_hz"] / 1e6, band["stop_hz"] / 1e6
        axes.axvspan(start, stop, color="#dde8f5", zorder=0)
        if limit is not None:
            axes.fill_between([start, stop], [limit, limit], [top, top], color="#f5c6c0", alpha=0.8, zorder=1, linewidth=0)
            axes.hlines(limit, start, stop, colors="#c0392b", linewidth=1.2, zorder=3)
            axes.annotate(f"{band['band']} ≤ {limit:g} dB", (start, limit), textcoords="offset points", xytext=(0, 3),
                          fontsize=8, color="#7b241c")
    if u is not None and u.shape == loss.shape:
        axes.fill_between(f, loss - u, np.minimum(loss + u, top), color="#7fb3d5", alpha=0.5, zorder=2,
                          label="expanded uncertainty (k = 2)")
    axes.plot(f, loss, color=_VERDICT_COLOURS.get(str(device.row["verdict"]), "#333333"), linewidth=1.4, zorder=4,
              label="insertion loss")
    axes.set_xlabel("frequency (MHz)")
    axes.set_ylabel("insertion loss (dB)")
    axes.set_ylim(min(0.0, float(np.nanmin(loss)) - 0.01), top)
    axes.grid(True, linewidth=0.4, alpha=0.6)
    axes.set_title(f"{device.serial}: insertion loss", fontsize=10)
    axes.legend(loc="lower right", fontsize=8)
    return _png(figure)


def overlay_plot(devices: Sequence[DeviceRecord], limits: Sequence[dict[str, Any]]) -> bytes:
    """Every device of the batch on one plot, coloured by verdict."""
    figure, axes = _figure(height=4.0)
    readable = [d for d in devices if d.frequencies_hz is not None and d.reflection is not None]
    curves = [metrics.vswr_from_reflection(np.abs(d.reflection)) for d in readable]
    top = _top(limits, curves)
    _limits_and_scale(axes, limits, top)
    labelled: set[str] = set()
    for device, vswr in zip(readable, curves, strict=True):
        verdict = str(device.row["verdict"])
        label = None if verdict in labelled else verdict
        labelled.add(verdict)
        axes.plot(device.frequencies_hz / 1e6, vswr, color=_VERDICT_COLOURS.get(verdict, "#333333"),
                  linewidth=0.9 if verdict == "pass" else 1.4, alpha=0.7 if verdict == "pass" else 1.0,
                  zorder=5 if verdict != "pass" else 4, label=label)
    axes.set_title(f"batch overlay: {len(readable)} device(s)", fontsize=10)
    if labelled:
        axes.legend(loc="upper left", fontsize=8)
    return _png(figure)


_STATUS_STYLE = {  # marker, colour, label
    "baseline": ("o", "#7f8c8d", "baseline"),
    "not judged": ("o", "#bdc3c7", "not judged (its calibration is in the baseline)"),
    "in control": ("o", "#1f77b4", "in control"),
    "warning": ("^", "#d68910", "out of control: warning (calibration made again)"),
    "failed": ("D", "#c0392b", "beyond the limits: check failed"),
    "left out": ("x", "#7b241c", "disagreed with its reference (not in the baseline)"),
}


def _statuses(chart: ChartData) -> list[str]:
    return [chart.category(i) for i in range(len(chart.rows))]


def _mean_chart(axes: Any, chart: ChartData, statuses: list[str]) -> None:
    x = np.arange(1, len(chart.rows) + 1)
    values = np.array([float(r["value"]) for r in chart.rows])
    base = chart.baseline
    if base is not None:
        for zone, alpha in ((2, 0.10), (1, 0.12)):
            axes.axhspan(base.center - zone * base.process_std, base.center + zone * base.process_std,
                         color="#aed6f1", alpha=alpha, zorder=0, linewidth=0)
        axes.axhline(base.center, color="#2a7d2a", linewidth=1.0, label=f"accepted value {base.center:.5f}")
        for limit in (base.lower, base.upper):
            axes.axhline(limit, color="#c0392b", linestyle="--", linewidth=1.0)
        axes.annotate(f"limits ±{base.limit_factor:.2f} s (t, K = {base.count})", (x[0], base.upper),
                      textcoords="offset points", xytext=(0, 3), fontsize=7, color="#7b241c")
    shown = values
    if base is not None:
        # Keep the limits readable: points far beyond them sit on the edge, their value written.
        span = base.upper - base.lower
        low, high = base.lower - 0.6 * span, base.upper + 0.6 * span
        shown = np.clip(values, low, high)
        for i in np.flatnonzero(shown != values):
            axes.annotate(f"{values[i]:.4f}", (x[i], shown[i]), textcoords="offset points",
                          xytext=(4, -10 if values[i] > high else 4), fontsize=7, color="#7b241c")
        axes.set_ylim(low - 0.05 * span, high + 0.05 * span)
    axes.plot(x, shown, color="#95a5a6", linewidth=0.8, zorder=2)
    for status, (marker, colour, label) in _STATUS_STYLE.items():
        chosen = [i for i, s in enumerate(statuses) if s == status]
        if chosen:
            axes.scatter(x[chosen], shown[chosen], marker=marker, color=colour, s=22, zorder=4, label=label)
    axes.set_ylabel("mean |Γ|")
    axes.grid(True, linewidth=0.4, alpha=0.6)
    axes.legend(loc="best", fontsize=7)


def _spread_chart(axes: Any, chart: ChartData) -> None:
    x = np.arange(1, len(chart.rows) + 1)
    spreads = np.array([np.nan if r["std_dev"] is None else float(r["std_dev"]) for r in chart.rows])
    axes.plot(x, spreads, marker="o", markersize=3, color="#1f77b4", linewidth=0.8)
    repeats = max((int(r["repeats"]) for r in chart.rows), default=1)
    limit = None if chart.baseline is None else chart.baseline.precision_limit(repeats)
    if limit is not None:
        axes.axhline(limit, color="#c0392b", linestyle="--", linewidth=1.0,
                     label=f"UCL s1·sqrt(F), alpha {DEFAULT_PRECISION_ALPHA:g}")
        axes.axhline(chart.baseline.pooled_std, color="#2a7d2a", linewidth=1.0, label="pooled s1")  # type: ignore[union-attr]
        axes.legend(loc="best", fontsize=7)
    axes.set_ylabel(f"s of {repeats} repeats")
    axes.set_xlabel("check (oldest first)")
    axes.grid(True, linewidth=0.4, alpha=0.6)


def control_chart_figure(chart: ChartData) -> Any:
    """A check standard's control chart as a matplotlib Figure: its figure per check with the
    accepted value, the t-based limits and the 1 s and 2 s zones of the run rules, each point
    marked by what the chart said of it; below it, when checks are repeated, the chart of their
    standard deviations.  The title names the check standard, the station and the analyzer, each
    wrapped to the figure's width."""
    import textwrap

    from matplotlib.figure import Figure

    repeated = any(r["std_dev"] is not None for r in chart.rows)
    figure = Figure(figsize=(7.5, 4.6 if repeated else 3.2), dpi=100, layout="constrained")
    if repeated:
        top, bottom = figure.subplots(2, 1, sharex=True, height_ratios=(2, 1))
    else:
        top, bottom = figure.add_subplot(), None
    _mean_chart(top, chart, _statuses(chart))
    key = chart.key
    lines = [f"check standard {key.check_standard}, {key.figure}", f"station: {key.station}", f"analyzer: {key.analyzer}"]
    top.set_title("\n".join(textwrap.fill(line, 110) for line in lines), fontsize=8)
    if bottom is not None:
        _spread_chart(bottom, chart)
    else:
        top.set_xlabel("check (oldest first)")
    return figure


def control_chart_plot(chart: ChartData) -> bytes:
    """:func:`control_chart_figure` as PNG bytes."""
    return _png(control_chart_figure(chart))
