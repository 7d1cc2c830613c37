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
