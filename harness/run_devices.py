"""How a run measures one device and what it makes of the sweep, for each kind of calibration.

The batch splits each device in two: :meth:`acquire` connects and sweeps (the run's main
thread: the analyzer and the operator), :meth:`evaluate` corrects, works out the figures with
the uncertainty of every point and judges them (the recording thread, overlapping the next
device's sweep).

- :class:`AsTerminatedDevices` (one-port calibration): the device's input reflection with its
  output on the qualified termination.
- :class:`TwoPortDevices` (one-path or SOLT): full S-parameters -- on a forward-only analyzer
  the device is turned round for its reverse direction -- and the figures of
  :mod:`lineproof.figures`, the sequence's choice judged.
- :class:`TransmissionDevices` (thru response): S21 between the ports, normalized, its
  insertion loss judged with the mismatch the normalization leaves in its uncertainty.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from lineproof import calibration, figures, steps, two_port, two_port_steps
from lineproof.decision import DecisionRule
from lineproof.recording import MeasurementBasis
from lineproof.two_port_residuals import ThruView
from lineproof.values import BandLimit, DeviceIdentity, DeviceResult


@dataclass(frozen=True, eq=False)
class Acquired:
    """The raw traces of one device's sweep(s), by name (see :mod:`lineproof.two_port_steps`)."""

    frequencies_hz: np.ndarray
    raw: Mapping[str, np.ndarray]


@dataclass(frozen=True, eq=False)
class Evaluated:
    """A judged device and what its record keeps: the data for its Touchstone file (the
    reflection (N,) or S-parameters (N, 2, 2)), the headline figure's uncertainty per point,
    more per-point arrays and what the data are."""

    result: DeviceResult
    frequencies_hz: np.ndarray
    data: np.ndarray
    uncertainty: np.ndarray | None
    arrays: Mapping[str, np.ndarray] = field(default_factory=dict)
    description: str | None = None


class AsTerminatedDevices:
    """One-port runs: the input reflection with the device's output on the termination."""

    two_port = False

    def __init__(self, station: steps.Station, bands: Sequence[BandLimit], rule: DecisionRule,
                 markers: Mapping[str, float] | None = None) -> None:
        self.station = station
        self.bands = bands
        self.rule = rule
        self.markers = dict(markers or {})

    def connect(self, device: DeviceIdentity, termination: str) -> None:
        port = self.station.port
        self.station.operator.connect(port, device.serial, termination,
                                      f"Connect {device.model} s/n {device.serial} to port {port}, "
                                      f"its output on {termination}")

    @property
    def scan_output(self) -> str | None:
        return None  # the prompt names the termination

    def acquire(self, device: DeviceIdentity, termination: str) -> Acquired:
        frequencies, raw = self.station.measure_raw()
        return Acquired(frequencies, {"S11": raw})

    def evaluate(self, device: DeviceIdentity, acquired: Acquired, basis: MeasurementBasis) -> Evaluated:
        """Correct, judge with the uncertainty of every point (the termination's own mismatch
        included)."""
        f = acquired.frequencies_hz
        corrected = calibration.correct_one_port(basis.calibration, f, acquired.raw["S11"])
        spread = steps.device_uncertainty(self.station, basis.calibration, f, corrected, basis.termination_data)
        result = steps.judge(device, f, corrected, self.bands, self.rule, spread.expanded,
                             termination=basis.qualification, markers=self.markers)
        return Evaluated(result, f, corrected, spread.expanded)


class TwoPortDevices:
    """One-path and SOLT runs: full S-parameters and the figures the sequence judges."""

    two_port = True

    def __init__(self, station: steps.Station, bands: Sequence[BandLimit], rule: DecisionRule, method: str,
                 judged: Sequence[str], as_terminated: str, markers: Mapping[str, float] | None = None) -> None:
        self.station = station
        self.bands = bands
        self.rule = rule
        self.markers = dict(markers or {})
        self.method = method  # the calibration's (a long name of lineproof.calibration)
        self.judged = tuple(judged)
        self.as_terminated = as_terminated
        #: per calibration id: its prepared correction and thru views (the same for every device)
        self._prepared: dict[str, tuple[two_port.TwelveTermCorrection, dict[str, ThruView]]] = {}

    def connect(self, device: DeviceIdentity, termination: str) -> None:
        two_port_steps.connect_between_ports(self.station, device)

    @property
    def scan_output(self) -> str | None:
        return "port:2"  # a scanned device goes between the ports first

    def acquire(self, device: DeviceIdentity, termination: str) -> Acquired:
        """The device is connected between the ports; sweep it (turned round for the reverse
        direction on a forward-only analyzer; on the termination too when the as-terminated
        figure is measured)."""
        terminated_on = termination if self.as_terminated == "measured" else None
        frequencies, raw = two_port_steps.sweep_device(self.station, self.method, device, connected=True,
                                                       terminated_on=terminated_on)
        return Acquired(frequencies, raw)

    def _prepare(self, basis: MeasurementBasis) -> tuple[two_port.TwelveTermCorrection, dict[str, ThruView]]:
        cal = basis.calibration
        if cal.calibration_id not in self._prepared:  # once per calibration
            self._prepared[cal.calibration_id] = (two_port.TwelveTermCorrection(cal), figures.thru_views(cal))
        return self._prepared[cal.calibration_id]

    def evaluate(self, device: DeviceIdentity, acquired: Acquired, basis: MeasurementBasis) -> Evaluated:
        f, raw = acquired.frequencies_hz, acquired.raw
        correction, views = self._prepare(basis)
        s = two_port_steps.correct_device(correction, f, raw)
        found = two_port_steps.device_figures(self.station, basis.calibration, f, s, basis.termination_data,
                                              raw.get(two_port_steps.TERMINATED), views)
        ordered = figures.headline_first(found, self.judged)
        transmission = figures.transmission_trace(basis.calibration, s, self.station.uncertainty, found)
        result = figures.judge_figures(device, f, ordered, self.bands, self.rule, self.judged,
                                       termination=basis.qualification, markers=self.markers,
                                       transmission=transmission)
        arrays = {f"{trace.name}.expanded_uncertainty": trace.expanded for trace in found if trace.expanded is not None}
        if transmission.phase_expanded_rad is not None:
            arrays["phase.expanded_uncertainty"] = transmission.phase_expanded_rad
        as_terminated = next((t for t in found if t.name == figures.AS_TERMINATED), None)
        if as_terminated is not None and as_terminated.reflection is not None:
            arrays["as-terminated.reflection"] = as_terminated.reflection
        way = "computed with" if self.as_terminated == "computed" else "measured on"
        description = (f"S-parameters of the device, port 1 its input and port 2 its output ({basis.calibration.method}"
                       f"); as-terminated figure {way} {basis.qualification.name}" if basis.qualification else
                       f"S-parameters of the device, port 1 its input and port 2 its output ({basis.calibration.method}"
                       "); no termination qualified, no as-terminated figure")
        return Evaluated(result, f, two_port.s_matrix(*s), ordered[0].expanded, arrays, description)


class TransmissionDevices:
    """Thru-response runs: S21 alone, corrected for tracking, judged on insertion loss."""

    two_port = True

    def __init__(self, station: steps.Station, bands: Sequence[BandLimit], rule: DecisionRule,
                 device_max_vswr: float | None, markers: Mapping[str, float] | None = None) -> None:
        self.station = station
        self.bands = bands
        self.rule = rule
        self.device_max_vswr = device_max_vswr
        self.markers = dict(markers or {})

    def connect(self, device: DeviceIdentity, termination: str | None) -> None:
        two_port_steps.connect_between_ports(self.station, device)

    @property
    def scan_output(self) -> str | None:
        return "port:2"

    def acquire(self, device: DeviceIdentity, termination: str | None) -> Acquired:
        frequencies, raw = two_port_steps.sweep_device(self.station, calibration.THRU_RESPONSE_METHOD, device,
                                                       connected=True)
        return Acquired(frequencies, raw)

    def evaluate(self, device: DeviceIdentity, acquired: Acquired, basis: MeasurementBasis) -> Evaluated:
        f = acquired.frequencies_hz
        result, found = two_port_steps.transmission_result(self.station, basis.calibration, device, f,
                                                           acquired.raw["S21"], self.bands, self.rule,
                                                           self.device_max_vswr, self.markers)
        arrays = {"insertion-loss.expanded_uncertainty": found.loss_expanded_db,
                  "insertion-loss.mismatch_bound": found.bounds.loss_db,
                  "phase.expanded_uncertainty": found.phase_expanded_rad}
        return Evaluated(result, f, two_port_steps.transmission_data(found.s21), found.loss_expanded_db, arrays,
                         two_port_steps.NORMALIZED)
