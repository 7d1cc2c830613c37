"""Two-port steps: SOLT, one-path and thru-response calibrations on a two-port analyzer, and
measuring a device with full S-parameters -- its input match with an ideal termination (S11),
output match (S22) and insertion loss, beside the as-terminated figure it would show on the
qualified termination.

A full analyzer sweeps S11, S21, S12 and S22 at once.  A forward-only (one-path) analyzer
sweeps S11 and S21; the operator then turns the device round for its reverse direction.
"""

from __future__ import annotations

from collections.abc import Collection, Mapping, Sequence

import numpy as np

from lineproof import calibration, figures, metrics, two_port
from lineproof.calkit import CalKit
from lineproof.decision import DecisionRule
from lineproof.deembed import Adapter, remove_from_two_port
from lineproof.errors import CalibrationError
from lineproof.markers import TransmissionTrace
from lineproof.normalization import NormalizedTransmission, normalize, stated_device_match
from lineproof.steps import QualifiedTermination, Station, device_uncertainty
from lineproof.two_port_residuals import ThruView
from lineproof.uncertainty import residual_model, transmission_model
from lineproof.values import BandLimit, CalibrationRecord, DeviceIdentity, DeviceResult

IDEAL_TERMINATION = figures.DESCRIPTIONS[figures.INPUT_MATCH]
REFLECTS = ("open", "short", "load")


def _sweep(station: Station, parameters: Sequence[str]) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    sweep = station.analyzer.measure(list(parameters))
    return sweep.frequencies_hz, {name: sweep[name] for name in parameters}


def _reflects(station: Station, kit: CalKit, ports: tuple[int, ...],
              isolation: bool) -> tuple[np.ndarray, dict[int, dict[str, np.ndarray]], np.ndarray | None]:
    """Raw reflection of each reflect standard on each port; with ``isolation`` (and loads
    on both ports) also the leakage S21, S12 of the load step."""
    measured: dict[int, dict[str, np.ndarray]] = {port: {} for port in ports}
    grid = frequencies = station.plan.frequencies()
    leakage = None
    for kind in REFLECTS:
        standard = kit.standard(kind)
        for port in ports:
            station.operator.connect(port, standard.name, None,
                                     f"Connect the {kind} standard ({standard.name}, kit {kit.name}) to port {port}")
        leak = isolation and kind == "load" and len(ports) == 2
        frequencies, traces = _sweep(station, [f"S{p}{p}" for p in ports] + (["S21", "S12"] if leak else []))
        calibration.check_grid(standard.name, frequencies, grid)
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
                                        leakage, kit_source=kit.source)
            residuals.update(residual_model(kit, REFLECTS, frequencies, station.uncertainty, "port2"))
        else:
            terms = two_port.solve_one_path(frequencies, reflects[1], ideals, thru["S11"], thru["S21"],
                                            kit.thru(frequencies), kit_source=kit.source)
        residuals.update(residual_model(kit, REFLECTS, frequencies, station.uncertainty, "port1"))
    else:
        raise CalibrationError(f"{method} is not a two-port method")
    residuals.update(transmission_model(kit, frequencies, station.uncertainty))
    return calibration.make_record(method, terms, frequencies, station.plan, station.identity, kit.name,
                                   kit.sha256, kit.reference_impedance_ohm, residuals)


#: The raw traces of a device swept for a two-port method (see :func:`sweep_device`).
RawDevice = dict[str, np.ndarray]
#: Raw trace names of a device turned round (one-path) and of its output on the termination.
REVERSED = "reversed "
TERMINATED = "terminated S11"


def connect_between_ports(station: Station, device: DeviceIdentity) -> None:
    station.operator.connect(1, device.serial, "port:2", f"Connect {device.model} s/n {device.serial} between "
                             "port 1 (its input) and port 2 (its output)")


def sweep_device(station: Station, method: str, device: DeviceIdentity, *, connected: bool = False,
                 terminated_on: str | None = None) -> tuple[np.ndarray, RawDevice]:
    """The raw traces of a device for a two-port ``method`` (a long name of
    :mod:`lineproof.calibration`): connected between the ports (unless ``connected`` says it
    is already), all four parameters in one sweep on a full analyzer; on a forward-only one,
    S11 and S21, then -- turned round -- the same again.  With ``terminated_on``, the device's
    output is then put on that termination and its input reflection swept too (the
    as-terminated figure measured directly).  A thru response sweeps S21 alone (it corrects
    nothing else)."""
    if method not in (calibration.FULL_TWO_PORT_METHOD, calibration.ONE_PATH_METHOD,
                      calibration.THRU_RESPONSE_METHOD):
        raise CalibrationError(f"a {method} calibration cannot measure transmission; use SOLT, one-path or thru "
                               "response")
    if not connected:
        connect_between_ports(station, device)
    if method == calibration.THRU_RESPONSE_METHOD:
        if terminated_on is not None:
            raise CalibrationError("a thru-response calibration measures no reflection: it cannot measure the "
                                   "as-terminated figure")
        return _sweep(station, ["S21"])
    if method == calibration.FULL_TWO_PORT_METHOD:
        f, raw = _sweep(station, ["S11", "S21", "S12", "S22"])
    else:
        f, raw = _sweep(station, ["S11", "S21"])
        station.operator.connect(1, device.serial, "port:2", f"Turn {device.model} s/n {device.serial} round: its "
                                 "output on port 1, its input on port 2", reversed=True)
        f2, backward = _sweep(station, ["S11", "S21"])
        _same(f, f2, "the two directions of a one-path measurement")
        raw.update({REVERSED + name: trace for name, trace in backward.items()})
    if terminated_on is not None:
        station.operator.connect(1, device.serial, terminated_on, f"Connect {device.model} s/n {device.serial} to "
                                 f"port 1, its output on {terminated_on}")
        f3, terminated = _sweep(station, ["S11"])
        _same(f, f3, "the as-terminated sweep and the two-port sweep")
        raw[TERMINATED] = terminated["S11"]
    return f, raw


def _same(a: np.ndarray, b: np.ndarray, what: str) -> None:
    if not calibration.same_grid(a, b):
        raise CalibrationError(f"{what} were swept on different grids; keep one sweep plan")


def correct_device(correction: two_port.TwelveTermCorrection, frequencies: np.ndarray, raw: RawDevice) -> two_port.Traces:
    """Corrected (S11, S21, S12, S22) of :func:`sweep_device`'s traces: a device turned round
    gives the reverse direction (its S11m and S21m stand for S22m and S12m)."""
    if "S22" in raw:
        return correction.apply(frequencies, raw["S11"], raw["S21"], raw["S12"], raw["S22"])
    return correction.apply(frequencies, raw["S11"], raw["S21"], raw[REVERSED + "S21"], raw[REVERSED + "S11"])


def measure_s(station: Station, cal: CalibrationRecord, device: DeviceIdentity) -> tuple[np.ndarray, np.ndarray]:
    """The device's corrected S-parameters (N, 2, 2) between port 1 (its input) and port 2."""
    f, raw = sweep_device(station, cal.method, device)
    return f, two_port.s_matrix(*correct_device(two_port.TwelveTermCorrection(cal), f, raw))


def device_figures(station: Station, cal: CalibrationRecord, frequencies: np.ndarray, s: two_port.Traces,
                   termination: QualifiedTermination | None, terminated_raw: np.ndarray | None = None,
                   views: Mapping[str, ThruView] | None = None) -> list[figures.FigureTrace]:
    """The figures of corrected traces ``s``: input and output match, insertion loss, and the
    as-terminated figure -- measured (``terminated_raw``, the device's output on the
    termination) or computed from the S-parameters and the termination's measured reflection."""
    known = None
    if termination is not None and terminated_raw is None:
        if not calibration.same_grid(termination.frequencies_hz, frequencies):
            raise CalibrationError(f"termination {termination.name} was qualified on another sweep")
        known = (termination.reflection, termination.standard_uncertainty)
    found = figures.two_port_figures(cal, frequencies, s, station.uncertainty, known, views)
    if terminated_raw is not None:
        corrected = calibration.correct_one_port(cal, frequencies, terminated_raw)
        spread = device_uncertainty(station, cal, frequencies, corrected, termination)
        found.insert(0, figures.FigureTrace(figures.AS_TERMINATED, spread.magnitude, spread.expanded, corrected))
    return found


def measure_two_port_device(
    station: Station,
    cal: CalibrationRecord,
    device: DeviceIdentity,
    bands: Sequence[BandLimit],
    rule: DecisionRule,
    termination: QualifiedTermination | None = None,
    markers: Mapping[str, float] | None = None,
    adapters: tuple[Adapter | None, Adapter | None] = (None, None),
    judged: Collection[str] = (figures.INPUT_MATCH, figures.INSERTION_LOSS),
) -> tuple[DeviceResult, np.ndarray, np.ndarray]:
    """Measure full S-parameters; judge the ``judged`` figures (by default S11 with an ideal
    termination, and insertion loss where a band limits it) and report the others beside
    them (output match; the as-terminated figure on the qualified termination, computed).
    ``adapters`` (input side, output side -- the latter with its port 1 at analyzer port 2)
    are removed from the data; the uncertainty is carried through unchanged (first order,
    for low-loss well-matched adapters)."""
    f, s = measure_s(station, cal, device)
    if any(adapter is not None for adapter in adapters):
        s = remove_from_two_port(f, s, *adapters)
    traces = (s[:, 0, 0], s[:, 1, 0], s[:, 0, 1], s[:, 1, 1])
    found = figures.headline_first(device_figures(station, cal, f, traces, termination), judged)
    extra = side_figures(f, s, bands, termination)
    extra.update({f"reference_plane.{side}_adapter_removed": adapter.name
                  for side, adapter in zip(("input", "output"), adapters, strict=True) if adapter is not None})
    result = figures.judge_figures(device, f, found, bands, rule, judged, markers=markers,
                                   termination=None if termination is None else termination.qualification,
                                   extra=extra,
                                   transmission=figures.transmission_trace(cal, traces, station.uncertainty, found))
    return result, f, s


#: What a thru-response record's data and headline are, in the words records use.
NORMALIZED = "S21 normalized by a thru response (transmission tracking corrected; S11, S12 and S22 not measured)"
NORMALIZED_FIGURE = f"{figures.DESCRIPTIONS[figures.INSERTION_LOSS]}, by thru response (normalization)"


def transmission_result(station: Station, cal: CalibrationRecord, device: DeviceIdentity, frequencies: np.ndarray,
                        raw_s21: np.ndarray, bands: Sequence[BandLimit], rule: DecisionRule,
                        device_max_vswr: float | None = None,
                        markers: Mapping[str, float] | None = None) -> tuple[DeviceResult, NormalizedTransmission]:
    """A device's raw S21 corrected by a thru response and judged on insertion loss, with the
    mismatch the normalization leaves in its uncertainty (:mod:`lineproof.normalization`):
    the station's stated raw match, and the devices' specified match within the bands when
    the sequence states one (else the passive bound from their transmission)."""
    known = stated_device_match(frequencies, bands, device_max_vswr)
    found = normalize(cal, frequencies, raw_s21, station.uncertainty, known)
    trace = figures.FigureTrace(figures.INSERTION_LOSS, found.loss_db, found.loss_expanded_db)
    source, load = station.uncertainty.raw_source_match, station.uncertainty.raw_load_match
    match = "bounded by the device's own transmission (passive, reciprocal)" if device_max_vswr is None else (
        f"VSWR {device_max_vswr:g} within the bands as the sequence states; elsewhere bounded by the device's own "
        "transmission (passive, reciprocal)")
    extra = {"normalization.raw_source_match": f"{source:.4f} (|reflection| at most, as the station states)",
             "normalization.raw_load_match": f"{load:.4f} (|reflection| at most, as the station states)",
             "normalization.device_match": match}
    for band in bands:
        points = metrics.band_indices(frequencies, band)
        extra[f"band.{band.name}.normalization.mismatch_bound_db"] = f"{float(found.bounds.loss_db[points].max()):.4f}"
    transmission = TransmissionTrace(found.s21, found.loss_expanded_db, found.phase_expanded_rad)
    result = figures.judge_figures(device, frequencies, [trace], bands, rule, (figures.INSERTION_LOSS,),
                                   markers=markers, extra=extra, description=NORMALIZED_FIGURE,
                                   transmission=transmission)
    return result, found


def measure_transmission_device(station: Station, cal: CalibrationRecord, device: DeviceIdentity,
                                bands: Sequence[BandLimit], rule: DecisionRule, device_max_vswr: float | None = None,
                                markers: Mapping[str, float] | None = None,
                                ) -> tuple[DeviceResult, np.ndarray, NormalizedTransmission]:
    """Connect the device between the ports, sweep S21 and judge its insertion loss with a
    thru-response calibration (:func:`transmission_result`)."""
    f, raw = sweep_device(station, cal.method, device)
    result, found = transmission_result(station, cal, device, f, raw["S21"], bands, rule, device_max_vswr, markers)
    return result, f, found


def transmission_data(s21: np.ndarray) -> np.ndarray:
    """A two-port record of S21 alone: the parameters a thru response does not measure are
    NaN (Touchstone has no word for "not measured"; scikit-rf reads nan back as NaN)."""
    unknown = np.full(np.shape(s21), complex(np.nan, np.nan))
    return two_port.s_matrix(unknown, s21, unknown, unknown)


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
