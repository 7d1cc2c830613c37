"""Two-port steps: SOLT, one-path and thru-response calibrations on a two-port analyzer, and
measuring a device with full S-parameters -- its input match with an ideal termination (S11),
output match (S22) and insertion loss, beside the as-terminated figure it would show on the
qualified termination.

A full analyzer sweeps S11, S21, S12 and S22 at once.  A forward-only (one-path) analyzer
sweeps S11 and S21; the operator then turns the device round for its reverse direction.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from lineproof import calibration, metrics, two_port
from lineproof.calkit import CalKit
from lineproof.decision import DecisionRule
from lineproof.deembed import Adapter, remove_from_two_port
from lineproof.errors import CalibrationError
from lineproof.steps import QualifiedTermination, Station, judge
from lineproof.uncertainty import (
    reflection_uncertainty,
    residual_model,
    transmission_model,
    transmission_uncertainty_db,
)
from lineproof.values import BandLimit, CalibrationRecord, DeviceIdentity, DeviceResult

IDEAL_TERMINATION = "S11 (device with an ideal termination, from full S-parameters)"
REFLECTS = ("open", "short", "load")


def _sweep(station: Station, parameters: Sequence[str]) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    sweep = station.analyzer.measure(list(parameters))
    return sweep.frequencies_hz, {name: sweep[name] for name in parameters}


def _reflects(station: Station, kit: CalKit, ports: tuple[int, ...],
              isolation: bool) -> tuple[np.ndarray, dict[int, dict[str, np.ndarray]], np.ndarray | None]:
    """Raw reflection of each reflect standard on each port; with ``isolation`` (and loads
    on both ports) also the leakage S21, S12 of the load step."""
    measured: dict[int, dict[str, np.ndarray]] = {port: {} for port in ports}
    frequencies = station.plan.frequencies()
    leakage = None
    for kind in REFLECTS:
        standard = kit.standard(kind)
        for port in ports:
            station.operator.connect(port, standard.name, None,
                                     f"Connect the {kind} standard ({standard.name}, kit {kit.name}) to port {port}")
        leak = isolation and kind == "load" and len(ports) == 2
        frequencies, traces = _sweep(station, [f"S{p}{p}" for p in ports] + (["S21", "S12"] if leak else []))
        for port in ports:
            measured[port][kind] = traces[f"S{port}{port}"]
        if leak:
            zero = np.zeros(frequencies.shape, complex)
            leakage = two_port.s_matrix(zero, traces["S21"], traces["S12"], zero)
    return frequencies, measured, leakage


def _thru(station: Station, kit: CalKit, parameters: Sequence[str]) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    standard = kit.standard("thru")
    station.operator.connect(1, standard.name, "port:2",
                             f"Connect port 1 to port 2 through the thru ({standard.name}, kit {kit.name})")
    return _sweep(station, parameters)


def calibrate_two_port(station: Station, kit: CalKit, method: str, isolation: bool = False) -> CalibrationRecord:
    """Measure the standards the method needs and solve its terms.  ``isolation`` (full
    SOLT): take the leakage from the load step (loads on both ports) instead of zero -- worth
    it only where leakage stands above the trace noise it brings in."""
    frequencies = station.plan.frequencies()
    residuals: dict[str, np.ndarray] = {}
    if method == calibration.THRU_RESPONSE_METHOD:
        f, thru = _thru(station, kit, ["S21"])
        terms = two_port.solve_thru_response(thru["S21"], kit.thru(f))
        frequencies = f
    elif method in (calibration.FULL_TWO_PORT_METHOD, calibration.ONE_PATH_METHOD):
        full = method == calibration.FULL_TWO_PORT_METHOD
        frequencies, reflects, leakage = _reflects(station, kit, (1, 2) if full else (1,), isolation)
        f, thru = _thru(station, kit, ["S11", "S21", "S12", "S22"] if full else ["S11", "S21"])
        if not calibration.same_grid(f, frequencies):
            raise CalibrationError("the thru was measured on a different grid from the reflect standards; "
                                   "keep one sweep plan for the whole calibration")
        ideals = {kind: kit.ideal(kind, frequencies) for kind in REFLECTS}
        if full:
            raw = two_port.s_matrix(thru["S11"], thru["S21"], thru["S12"], thru["S22"])
            terms = two_port.solve_solt(frequencies, reflects[1], reflects[2], ideals, raw, kit.thru(frequencies),
                                        leakage)
            residuals.update(residual_model(kit, REFLECTS, frequencies, station.uncertainty, "port2"))
        else:
            terms = two_port.solve_one_path(frequencies, reflects[1], ideals, thru["S11"], thru["S21"],
                                            kit.thru(frequencies))
        residuals.update(residual_model(kit, REFLECTS, frequencies, station.uncertainty, "port1"))
    else:
        raise CalibrationError(f"{method} is not a two-port method")
    residuals.update(transmission_model(kit, frequencies, station.uncertainty))
    return calibration.make_record(method, terms, frequencies, station.plan, station.identity, kit.name,
                                   kit.sha256, kit.reference_impedance_ohm, residuals)


def measure_s(station: Station, cal: CalibrationRecord, device: DeviceIdentity) -> tuple[np.ndarray, np.ndarray]:
    """The device's corrected S-parameters (N, 2, 2) between port 1 (its input) and port 2."""
    if cal.method == calibration.FULL_TWO_PORT_METHOD:
        station.operator.connect(1, device.serial, "port:2",
                                 f"Connect {device.model} s/n {device.serial} between port 1 (input) and port 2")
        f, raw = _sweep(station, ["S11", "S21", "S12", "S22"])
        data = two_port.s_matrix(raw["S11"], raw["S21"], raw["S12"], raw["S22"])
    elif cal.method == calibration.ONE_PATH_METHOD:
        station.operator.connect(1, device.serial, "port:2",
                                 f"Connect {device.model} s/n {device.serial} between port 1 (input) and port 2")
        f, forward = _sweep(station, ["S11", "S21"])
        station.operator.connect(1, device.serial, "port:2",
                                 f"Turn {device.model} s/n {device.serial} round: its output on port 1, input on port 2",
                                 reversed=True)
        f2, backward = _sweep(station, ["S11", "S21"])
        if not calibration.same_grid(f, f2):
            raise CalibrationError("the two directions of a one-path measurement were swept on different grids")
        data = two_port.compose_one_path((forward["S11"], forward["S21"]), (backward["S11"], backward["S21"]))
    else:
        raise CalibrationError(f"calibration {cal.calibration_id} is {cal.method}; measuring full S-parameters "
                               "needs a SOLT or one-path calibration")
    return f, two_port.correct_two_port(cal, f, data)


def measure_two_port_device(
    station: Station,
    cal: CalibrationRecord,
    device: DeviceIdentity,
    bands: Sequence[BandLimit],
    rule: DecisionRule,
    termination: QualifiedTermination | None = None,
    markers: Mapping[str, float] | None = None,
    adapters: tuple[Adapter | None, Adapter | None] = (None, None),
) -> tuple[DeviceResult, np.ndarray, np.ndarray]:
    """Measure full S-parameters; judge S11 with an ideal termination (and insertion loss
    where a band limits it), and record output match and the as-terminated figure beside it.
    ``adapters`` (input side, output side -- the latter with its port 1 at analyzer port 2)
    are removed from the data; the uncertainty is carried through unchanged (first order,
    for low-loss well-matched adapters)."""
    f, s = measure_s(station, cal, device)
    if any(adapter is not None for adapter in adapters):
        s = remove_from_two_port(f, s, *adapters)
    product = s[:, 1, 0] * s[:, 0, 1]
    spread = reflection_uncertainty(cal.residuals, s[:, 0, 0], f, station.uncertainty,
                                    interpolation_error=cal.interpolation_error,
                                    transmission=(product, cal.terms["forward.load_match"]))
    loss = metrics.insertion_loss_db(s[:, 1, 0])
    loss_u = transmission_uncertainty_db(cal.residuals, s, station.uncertainty)
    extra = side_figures(f, s, bands, termination)
    extra.update({f"reference_plane.{side}_adapter_removed": adapter.name
                  for side, adapter in zip(("input", "output"), adapters, strict=True) if adapter is not None})
    result = judge(device, f, s[:, 0, 0], bands, rule, spread.expanded, insertion_loss_db=loss,
                   insertion_loss_uncertainty_db=loss_u, markers=markers,
                   termination=None if termination is None else termination.qualification,
                   figure=IDEAL_TERMINATION, extra=extra)
    return result, f, s


def side_figures(f: np.ndarray, s: np.ndarray, bands: Sequence[BandLimit],
                 termination: QualifiedTermination | None) -> dict[str, str]:
    """Worst output match per band and, with a qualified termination, the worst as-terminated
    input VSWR the device would show on it (Γin = S11 + S21 S12 ΓL / (1 - S22 ΓL))."""
    extra: dict[str, str] = {}
    output = np.abs(s[:, 1, 1])
    terminated = None
    if termination is not None:
        if not calibration.same_grid(termination.frequencies_hz, f):
            raise CalibrationError(f"termination {termination.name} was qualified on another sweep")
        terminated = np.abs(two_port.terminated_reflection(s, termination.reflection))
    for band in bands:
        worst, at = metrics.worst_in_band(f, output, band)
        extra[f"band.{band.name}.output_match.worst_vswr"] = f"{float(metrics.vswr_from_reflection(worst)):.4f}"
        extra[f"band.{band.name}.output_match.worst_frequency_hz"] = f"{at:.10g}"
        if terminated is not None:
            worst, at = metrics.worst_in_band(f, terminated, band)
            extra[f"band.{band.name}.as_terminated.worst_vswr"] = f"{float(metrics.vswr_from_reflection(worst)):.4f}"
            extra[f"band.{band.name}.as_terminated.worst_frequency_hz"] = f"{at:.10g}"
    return extra
