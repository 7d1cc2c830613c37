"""Steps of a measurement: calibrate, qualify the termination, measure and judge a device.

Each step sees the analyzer and operator interfaces and value types, never a transport or a
command string.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime

import numpy as np

from lineproof import calibration, metrics
from lineproof.calkit import CalKit
from lineproof.decision import RULE_TEXT, DecisionRule, judge_upper_limit
from lineproof.errors import RunHalted
from lineproof.interfaces import Analyzer, Operator
from lineproof.values import (
    BandLimit,
    BandResult,
    CalibrationRecord,
    DeviceIdentity,
    DeviceResult,
    InstrumentIdentity,
    SweepPlan,
    TerminationQualification,
)

#: Common practice, no published source: a termination used to terminate a DUT's output
#: should itself be 1.05:1 or better across the sweep.
DEFAULT_TERMINATION_LIMIT_VSWR = 1.05


@dataclass
class Station:
    """An analyzer on one port with whoever connects things to it."""

    analyzer: Analyzer
    operator: Operator
    identity: InstrumentIdentity
    plan: SweepPlan
    port: int = 1

    @property
    def parameter(self) -> str:
        return f"S{self.port}{self.port}"

    def measure_raw(self) -> tuple[np.ndarray, np.ndarray]:
        sweep = self.analyzer.measure([self.parameter])
        return sweep.frequencies_hz, sweep[self.parameter]


def calibrate_one_port(station: Station, kit: CalKit) -> CalibrationRecord:
    """Measure the kit's open, short and load at the reference plane and solve the terms."""
    measured: dict[str, np.ndarray] = {}
    ideals: dict[str, np.ndarray] = {}
    frequencies = station.plan.frequencies()
    for kind in ("open", "short", "load"):
        standard = kit.standard(kind)
        station.operator.connect(
            station.port, standard.name, None,
            f"Connect the {kind} standard ({standard.name}, kit {kit.name}) to port {station.port}",
        )
        frequencies, measured[standard.name] = station.measure_raw()
        ideals[standard.name] = kit.ideal(kind, frequencies)
    terms = calibration.solve_one_port(frequencies, measured, ideals)
    return calibration.make_record(
        calibration.ONE_PORT_METHOD, terms, frequencies, station.plan, station.identity,
        kit.name, kit.sha256, kit.reference_impedance_ohm,
    )


def measure_corrected(station: Station, cal: CalibrationRecord) -> tuple[np.ndarray, np.ndarray]:
    frequencies, raw = station.measure_raw()
    return frequencies, calibration.correct_one_port(cal, frequencies, raw)


def qualify_termination(
    station: Station, cal: CalibrationRecord, name: str, limit_vswr: float = DEFAULT_TERMINATION_LIMIT_VSWR
) -> TerminationQualification:
    """Measure the termination alone; stop the run if its VSWR exceeds the limit anywhere."""
    station.operator.connect(station.port, name, None, f"Connect the termination {name} alone to port {station.port}")
    frequencies, corrected = measure_corrected(station, cal)
    vswr = metrics.vswr_from_reflection(np.abs(corrected))
    worst = int(np.argmax(vswr))
    result = TerminationQualification(name, float(vswr[worst]), float(frequencies[worst]), limit_vswr)
    if not result.passed:
        raise RunHalted(
            f"termination {name} failed qualification: worst VSWR {result.worst_vswr:.3f}:1 at "
            f"{result.worst_frequency_hz / 1e6:.1f} MHz exceeds {limit_vswr:.3f}:1. Its own mismatch would "
            "be read as the device's. Clean and inspect its connector, or use a better termination, then run again."
        )
    return result


def judge(
    device: DeviceIdentity,
    frequencies: np.ndarray,
    reflection: np.ndarray,
    bands: Sequence[BandLimit],
    rule: DecisionRule,
    expanded_uncertainty: np.ndarray | None = None,
) -> DeviceResult:
    """Per-band worst and mean figures and the verdict of each band."""
    magnitude = np.abs(reflection)
    results = []
    for band in bands:
        figures = metrics.band_figures(frequencies, magnitude, band)
        in_band_u = None if expanded_uncertainty is None else expanded_uncertainty[figures.indices]
        verdict = judge_upper_limit(magnitude[figures.indices], band.max_reflection, in_band_u, rule)
        worst_u = None if in_band_u is None else float(np.max(in_band_u))
        results.append(BandResult(
            band, figures.worst_reflection, figures.worst_frequency_hz, figures.mean_reflection,
            worst_u, verdict, RULE_TEXT[rule],
        ))
    return DeviceResult(device, tuple(results), datetime.now(UTC).isoformat(timespec="seconds"))


def measure_device(
    station: Station,
    cal: CalibrationRecord,
    device: DeviceIdentity,
    termination: str,
    bands: Sequence[BandLimit],
    rule: DecisionRule,
) -> tuple[DeviceResult, np.ndarray, np.ndarray]:
    """Connect the device with its output on the qualified termination, measure, judge."""
    station.operator.connect(
        station.port, device.serial, termination,
        f"Connect {device.model} s/n {device.serial} to port {station.port}, its output on {termination}",
    )
    frequencies, corrected = measure_corrected(station, cal)
    return judge(device, frequencies, corrected, bands, rule), frequencies, corrected
