"""Steps of a measurement: calibrate, qualify the termination, measure and judge a device.

Each step sees the analyzer and operator interfaces and value types, never a transport or a
command string.  Two-port calibrations and measurements are in :mod:`lineproof.two_port_steps`;
:func:`calibrate` picks the method the analyzer's capabilities allow.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from lineproof import calibration, figures, metrics
from lineproof.calkit import CalKit
from lineproof.decision import DecisionRule
from lineproof.deembed import Adapter, remove_from_reflection
from lineproof.errors import InputError, RunHalted
from lineproof.interfaces import Analyzer, Operator
from lineproof.uncertainty import (
    ReflectionUncertainty,
    UncertaintySettings,
    reflection_uncertainty,
    residual_model,
    termination_rms,
)
from lineproof.values import (
    BandLimit,
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
AS_TERMINATED = figures.DESCRIPTIONS[figures.AS_TERMINATED]


@dataclass
class Station:
    """An analyzer with whoever connects things to it, and what the station knows about its
    own uncertainty (connector repeatability, trace noise)."""

    analyzer: Analyzer
    operator: Operator
    identity: InstrumentIdentity
    plan: SweepPlan
    port: int = 1
    uncertainty: UncertaintySettings = field(default_factory=UncertaintySettings)

    @property
    def parameter(self) -> str:
        return f"S{self.port}{self.port}"

    @property
    def paths(self) -> str:
        return str(getattr(self.analyzer.capabilities, "paths", "reflection"))

    def measure_raw(self) -> tuple[np.ndarray, np.ndarray]:
        sweep = self.analyzer.measure([self.parameter])
        return sweep.frequencies_hz, sweep[self.parameter]


@dataclass(frozen=True, eq=False)
class QualifiedTermination:
    """A termination measured alone: its qualification and, per point, its corrected
    reflection with the standard and expanded uncertainty of measuring it."""

    qualification: TerminationQualification
    frequencies_hz: np.ndarray
    reflection: np.ndarray
    standard_uncertainty: np.ndarray
    expanded_uncertainty: np.ndarray

    @property
    def name(self) -> str:
        return self.qualification.name


def calibrate(station: Station, kit: CalKit, wanted: str | None = None, isolation: bool = False) -> CalibrationRecord:
    """Calibrate with the best method the analyzer allows (or ``wanted``, a short name from
    :data:`lineproof.calibration.METHOD_NAMES`); the record's ``method`` says which.
    ``isolation``: measure leakage in a full SOLT (see :mod:`lineproof.two_port_steps`)."""
    method = calibration.choose_method(station.paths, wanted)
    if method == calibration.ONE_PORT_METHOD:
        return calibrate_one_port(station, kit)
    from lineproof import two_port_steps

    return two_port_steps.calibrate_two_port(station, kit, method, isolation)


def calibrate_one_port(station: Station, kit: CalKit) -> CalibrationRecord:
    """Measure the kit's open, short and load at the reference plane and solve the terms."""
    measured: dict[str, np.ndarray] = {}
    ideals: dict[str, np.ndarray] = {}
    grid = frequencies = station.plan.frequencies()
    for kind in ("open", "short", "load"):
        standard = kit.standard(kind)
        station.operator.connect(
            station.port, standard.name, None,
            f"Connect the {kind} standard ({standard.name}, kit {kit.name}) to port {station.port}",
        )
        frequencies, measured[standard.name] = station.measure_raw()
        calibration.check_grid(standard.name, frequencies, grid)
        ideals[standard.name] = kit.ideal(kind, frequencies)
    terms = calibration.solve_one_port(frequencies, measured, ideals, kit_source=kit.source)
    residuals = residual_model(kit, ("open", "short", "load"), frequencies, station.uncertainty)
    return calibration.make_record(
        calibration.ONE_PORT_METHOD, terms, frequencies, station.plan, station.identity,
        kit.name, kit.sha256, kit.reference_impedance_ohm, residuals,
    )


def measure_corrected(station: Station, cal: CalibrationRecord) -> tuple[np.ndarray, np.ndarray]:
    frequencies, raw = station.measure_raw()
    return frequencies, calibration.correct_one_port(cal, frequencies, raw)


def measure_termination(
    station: Station, cal: CalibrationRecord, name: str, limit_vswr: float = DEFAULT_TERMINATION_LIMIT_VSWR
) -> QualifiedTermination:
    """Measure the termination alone; stop the run if its VSWR exceeds the limit anywhere."""
    station.operator.connect(station.port, name, None, f"Connect the termination {name} alone to port {station.port}")
    frequencies, corrected = measure_corrected(station, cal)
    spread = reflection_uncertainty(cal.residuals, corrected, frequencies, station.uncertainty,
                                    interpolation_error=cal.interpolation_error)
    vswr = metrics.vswr_from_reflection(np.abs(corrected))
    worst = int(np.argmax(vswr))
    result = TerminationQualification(name, float(vswr[worst]), float(frequencies[worst]), limit_vswr,
                                      float(spread.expanded[worst]))
    if not result.passed:
        raise RunHalted(
            f"termination {name} failed qualification: worst VSWR {result.worst_vswr:.3f}:1 at "
            f"{result.worst_frequency_hz / 1e6:.1f} MHz exceeds {limit_vswr:.3f}:1. Its own mismatch would "
            "be read as the device's. Clean and inspect its connector, or use a better termination, then run again."
        )
    return QualifiedTermination(result, frequencies, corrected, spread.standard_uncertainty, spread.expanded)


def qualify_termination(
    station: Station, cal: CalibrationRecord, name: str, limit_vswr: float = DEFAULT_TERMINATION_LIMIT_VSWR
) -> TerminationQualification:
    """:func:`measure_termination`, returning only the qualification."""
    return measure_termination(station, cal, name, limit_vswr).qualification


def judge(
    device: DeviceIdentity,
    frequencies: np.ndarray,
    reflection: np.ndarray,
    bands: Sequence[BandLimit],
    rule: DecisionRule,
    expanded_uncertainty: np.ndarray | None = None,
    *,
    insertion_loss_db: np.ndarray | None = None,
    insertion_loss_uncertainty_db: np.ndarray | None = None,
    markers: Mapping[str, float] | None = None,
    termination: TerminationQualification | None = None,
    figure: str = AS_TERMINATED,
    extra: Mapping[str, str] | None = None,
) -> DeviceResult:
    """Per-band worst and mean figures, marker readings and the verdict of each band under
    ``rule`` (the rule's text goes into every band result): the reflection, described by
    ``figure``, and insertion loss where a band limits it (see :mod:`lineproof.figures` for
    judging a chosen set of figures)."""
    name = next((n for n, text in figures.DESCRIPTIONS.items() if text == figure), figures.AS_TERMINATED)
    traces = [figures.FigureTrace(name, np.abs(reflection), expanded_uncertainty, reflection)]
    if insertion_loss_db is not None:
        traces.append(figures.FigureTrace(figures.INSERTION_LOSS, insertion_loss_db, insertion_loss_uncertainty_db))
    else:
        for band in bands:
            if band.max_insertion_loss_db is not None:
                raise InputError(f"band {band.name} has an insertion-loss limit, but this measurement has no "
                                 "transmission data", key=f"bands.{band.name}.max_insertion_loss_db",
                                 fix="measure with a two-port calibration, or drop the insertion-loss limit")
    return figures.judge_figures(device, frequencies, traces, bands, rule, {name, figures.INSERTION_LOSS},
                                 markers=markers, termination=termination, extra=extra, description=figure)


def termination_reach(termination: str | QualifiedTermination, frequencies: np.ndarray) -> np.ndarray | float:
    """What is known of the reflection of the termination on the device's output: measured
    here (:func:`lineproof.uncertainty.termination_rms` per point), else its qualification
    limit (1.05:1) as a worst case."""
    if isinstance(termination, QualifiedTermination):
        if not calibration.same_grid(termination.frequencies_hz, frequencies):
            raise RunHalted(f"termination {termination.name} was qualified on another sweep; qualify it on this one")
        return termination_rms(termination.reflection, termination.standard_uncertainty)
    limit = DEFAULT_TERMINATION_LIMIT_VSWR
    return float((limit - 1) / (limit + 1))


def measure_device(
    station: Station,
    cal: CalibrationRecord,
    device: DeviceIdentity,
    termination: str | QualifiedTermination,
    bands: Sequence[BandLimit],
    rule: DecisionRule,
    markers: Mapping[str, float] | None = None,
    adapter: Adapter | None = None,
) -> tuple[DeviceResult, np.ndarray, np.ndarray]:
    """Connect the device with its output on the qualified termination, measure, judge with
    the uncertainty of every point (the termination's own mismatch included).  An
    ``adapter`` between the reference plane and the device is removed (de-embedded); the
    uncertainty is that of the reading at the reference plane, carried through unchanged (a
    first-order view that holds for a low-loss, well-matched adapter)."""
    name = termination if isinstance(termination, str) else termination.name
    station.operator.connect(
        station.port, device.serial, name,
        f"Connect {device.model} s/n {device.serial} to port {station.port}, its output on {name}",
    )
    frequencies, corrected = measure_corrected(station, cal)
    spread = device_uncertainty(station, cal, frequencies, corrected, termination)
    extra = {}
    if adapter is not None:
        corrected = remove_from_reflection(adapter, frequencies, corrected)
        extra["reference_plane.adapter_removed"] = adapter.name
    qualification = termination.qualification if isinstance(termination, QualifiedTermination) else None
    result = judge(device, frequencies, corrected, bands, rule, spread.expanded, markers=markers,
                   termination=qualification, extra=extra)
    return result, frequencies, corrected


def device_uncertainty(station: Station, cal: CalibrationRecord, frequencies: np.ndarray, corrected: np.ndarray,
                       termination: str | QualifiedTermination | None) -> ReflectionUncertainty:
    """Uncertainty of an as-terminated one-port measurement at every point."""
    reach = None if termination is None else termination_reach(termination, frequencies)
    return reflection_uncertainty(cal.residuals, corrected, frequencies, station.uncertainty,
                                  termination_reach=reach, interpolation_error=cal.interpolation_error)
