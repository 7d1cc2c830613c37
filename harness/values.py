"""Value types shared by every layer: frozen, SI units inside, no I/O in constructors.

Every layer may import this module (it imports only numpy and :mod:`lineproof.errors`).
Frequencies are in Hz, power in dBm only where an instrument setting is one, reflection as
linear |Γ|; VSWR is a ratio.  Decibels appear here only where the trade states a figure
that way (return loss in a result summary) and are always named ``..._db``.
S-parameters of a corrected device travel as ``skrf.Network`` outside this module.
"""

from __future__ import annotations

import enum
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

import numpy as np


def _frozen_array(values: np.ndarray, dtype: type) -> np.ndarray:
    array = np.array(values, dtype=dtype, copy=True)
    array.setflags(write=False)
    return array


@dataclass(frozen=True)
class SweepPlan:
    """A linear frequency sweep as asked of an analyzer."""

    start_hz: float
    stop_hz: float
    points: int
    if_bandwidth_hz: float = 1000.0
    power_dbm: float | None = None

    def __post_init__(self) -> None:
        if not (math.isfinite(self.start_hz) and math.isfinite(self.stop_hz)):
            raise ValueError("sweep start and stop must be finite")
        if self.start_hz <= 0 or self.stop_hz < self.start_hz:
            raise ValueError(
                f"sweep needs 0 < start <= stop, got {self.start_hz} Hz .. {self.stop_hz} Hz"
            )
        if self.points < 1 or (self.points == 1 and self.stop_hz != self.start_hz):
            raise ValueError(f"sweep needs at least 2 points over a span, got {self.points}")
        if self.if_bandwidth_hz <= 0:
            raise ValueError(f"IF bandwidth must be positive, got {self.if_bandwidth_hz} Hz")

    def frequencies(self) -> np.ndarray:
        """The frequency grid in Hz, exactly as an instrument with this plan steps it."""
        return np.linspace(self.start_hz, self.stop_hz, self.points)

    def describe(self) -> str:
        text = (
            f"{self.start_hz / 1e6:g}-{self.stop_hz / 1e6:g} MHz, {self.points} points, "
            f"IF bandwidth {self.if_bandwidth_hz:g} Hz"
        )
        if self.power_dbm is not None:
            text += f", {self.power_dbm:g} dBm"
        return text


@dataclass(frozen=True)
class InstrumentIdentity:
    """Who answered: the four fields of an IEEE 488.2 *IDN? reply plus where it lives."""

    manufacturer: str
    model: str
    serial: str
    firmware: str
    resource: str = ""

    def describe(self) -> str:
        return f"{self.manufacturer} {self.model} s/n {self.serial} fw {self.firmware}"


@dataclass(frozen=True, eq=False)
class MeasuredSweep:
    """Complex traces on one frequency grid, keyed by parameter name ("S11", "S21", ...)."""

    frequencies_hz: np.ndarray
    traces: Mapping[str, np.ndarray]
    corrected: bool = False

    def __post_init__(self) -> None:
        frequencies = _frozen_array(self.frequencies_hz, float)
        traces = {}
        for name, trace in self.traces.items():
            data = _frozen_array(trace, complex)
            if data.shape != frequencies.shape:
                raise ValueError(
                    f"trace {name} has {data.size} points, the grid has {frequencies.size}"
                )
            traces[name] = data
        object.__setattr__(self, "frequencies_hz", frequencies)
        object.__setattr__(self, "traces", MappingProxyType(traces))

    def __getitem__(self, parameter: str) -> np.ndarray:
        return self.traces[parameter]


@dataclass(frozen=True)
class BandLimit:
    """A named band with its limit set: input VSWR (required; ``math.inf`` for a band with
    no match limit), and optionally a minimum return loss and a maximum insertion loss."""

    name: str
    start_hz: float
    stop_hz: float
    max_vswr: float
    min_return_loss_db: float | None = None
    max_insertion_loss_db: float | None = None

    def __post_init__(self) -> None:
        if self.stop_hz < self.start_hz:
            raise ValueError(f"band {self.name}: stop below start")
        if not self.max_vswr > 1.0:
            raise ValueError(f"band {self.name}: a VSWR limit must exceed 1.0")
        if self.min_return_loss_db is not None and not self.min_return_loss_db > 0.0:
            raise ValueError(f"band {self.name}: a return-loss limit must be above 0 dB")
        if self.max_insertion_loss_db is not None and not math.isfinite(self.max_insertion_loss_db):
            raise ValueError(f"band {self.name}: an insertion-loss limit must be a finite number of dB")

    @property
    def max_reflection(self) -> float:
        """The tightest match limit as |Γ|: from the VSWR limit (|Γ| = (VSWR-1)/(VSWR+1)) and,
        when given, the return-loss limit (|Γ| = 10^(-RL/20))."""
        limit = 1.0 if math.isinf(self.max_vswr) else (self.max_vswr - 1.0) / (self.max_vswr + 1.0)
        if self.min_return_loss_db is not None:
            limit = min(limit, 10.0 ** (-self.min_return_loss_db / 20.0))
        return limit


class Verdict(str, enum.Enum):
    """Outcome of judging a measurement against a limit (ILAC-G8:09/2019 wording)."""

    PASS = "pass"
    FAIL = "fail"
    INDETERMINATE = "indeterminate"

    @staticmethod
    def combine(verdicts: list[Verdict] | tuple[Verdict, ...]) -> Verdict:
        """A device passes only if every band passes; any fail makes it fail."""
        if any(v is Verdict.FAIL for v in verdicts):
            return Verdict.FAIL
        if any(v is Verdict.INDETERMINATE for v in verdicts):
            return Verdict.INDETERMINATE
        return Verdict.PASS


@dataclass(frozen=True)
class MarkerReading:
    """What a device reads at a named marker frequency (the nearest sweep point): the headline
    match figure's |Γ| (``figure``; None for transmission-only data) and, with transmission
    data, insertion loss, the phase of S21 and group delay -- each with its expanded
    uncertainty (None: not evaluated; a group delay of NaN: the sweep does not resolve it)."""

    name: str
    frequency_hz: float
    reflection: float | None
    expanded_uncertainty: float | None = None
    insertion_loss_db: float | None = None
    figure: str | None = "as-terminated"
    insertion_loss_uncertainty_db: float | None = None
    phase_deg: float | None = None
    phase_uncertainty_deg: float | None = None
    group_delay_s: float | None = None
    group_delay_uncertainty_s: float | None = None
    #: The frequency the sequence named, when it is not a sweep point (``frequency_hz`` is then
    #: the nearest point, where the reading was taken).
    requested_hz: float | None = None

    @property
    def vswr(self) -> float | None:
        return None if self.reflection is None else _vswr(self.reflection)

    @property
    def return_loss_db(self) -> float | None:
        if self.reflection is None:
            return None
        return math.inf if self.reflection == 0 else -20.0 * math.log10(self.reflection)


@dataclass(frozen=True)
class FigureResult:
    """One figure of one band (see :mod:`lineproof.figures`): a reflection figure in |Γ|
    (``as-terminated``, ``input-match``, ``output-match``) or insertion loss in dB.

    ``limit`` is the band's limit for it (|Γ| or dB; None: the band sets none);
    ``expanded_uncertainty`` the largest expanded uncertainty in the band and ``worst_upper``
    the largest value + U; ``verdict`` is None when the figure is reported beside the judged
    ones rather than judged.
    """

    figure: str
    worst: float
    worst_frequency_hz: float
    mean: float
    limit: float | None
    expanded_uncertainty: float | None
    worst_upper: float | None
    verdict: Verdict | None

    @property
    def judged(self) -> bool:
        return self.verdict is not None


@dataclass(frozen=True)
class BandResult:
    """One band of one device: worst and mean figures and the verdict.

    ``worst_reflection`` and ``mean_reflection`` are the headline match figure's |Γ| (None
    for transmission-only data: a thru response measures no reflection; the band's figures
    then hold insertion loss, and ``worst_frequency_hz`` is its worst point);
    ``expanded_uncertainty`` is the largest expanded (k = 2) uncertainty of |Γ| in the band;
    ``worst_upper_reflection`` the largest |Γ| + U (what guard-banded acceptance compares).
    Insertion-loss figures are present when the band has transmission data.
    """

    limit: BandLimit
    worst_reflection: float | None
    worst_frequency_hz: float
    mean_reflection: float | None
    expanded_uncertainty: float | None
    verdict: Verdict
    decision_rule: str
    worst_upper_reflection: float | None = None
    worst_insertion_loss_db: float | None = None
    worst_insertion_loss_frequency_hz: float | None = None
    insertion_loss_uncertainty_db: float | None = None
    #: The markers inside the band (the device's, see :attr:`DeviceResult.markers`).
    markers: tuple[MarkerReading, ...] = ()
    #: Every figure of the band, judged or reported beside (two-port data), the headline first.
    figures: tuple[FigureResult, ...] = ()
    #: Smallest and largest group delay of S21 over the band (s; transmission data only; NaN
    #: when the sweep does not resolve the phase).
    group_delay_s: tuple[float, float] | None = None

    def figure(self, name: str) -> FigureResult | None:
        return next((f for f in self.figures if f.figure == name), None)

    @property
    def worst_vswr(self) -> float | None:
        return None if self.worst_reflection is None else _vswr(self.worst_reflection)

    @property
    def mean_vswr(self) -> float | None:
        return None if self.mean_reflection is None else _vswr(self.mean_reflection)

    @property
    def worst_return_loss_db(self) -> float | None:
        if self.worst_reflection is None:
            return None
        return math.inf if self.worst_reflection == 0 else -20.0 * math.log10(self.worst_reflection)

    @property
    def headline(self) -> str:
        """The figure the band's headline is: its first figure (as-terminated for one-port data)."""
        return self.figures[0].figure if self.figures else "as-terminated"


def _vswr(reflection: float) -> float:
    return math.inf if reflection >= 1.0 else (1.0 + reflection) / (1.0 - reflection)


@dataclass(frozen=True, eq=False)
class CalibrationRecord:
    """A solved calibration: its error terms on its own grid and where they came from.

    ``terms`` maps an error-term name (see :mod:`lineproof.calibration`) to a complex array
    on ``frequencies_hz``.
    """

    calibration_id: str
    method: str
    kit_name: str
    kit_hash: str
    created_utc: str
    instrument: InstrumentIdentity
    plan: SweepPlan
    reference_impedance_ohm: float
    frequencies_hz: np.ndarray
    terms: Mapping[str, np.ndarray]
    #: Residual-error model of the calibration (see :mod:`lineproof.uncertainty`): complex
    #: arrays whose first axis is the calibration grid.
    residuals: Mapping[str, np.ndarray] = field(default_factory=dict)
    temperature_c: float | None = None
    #: Set when the terms were interpolated onto a sweep grid: the interpolation's own
    #: estimate of the largest error it adds to a corrected reflection (|Γ|).
    interpolation_error: float | None = None

    def __post_init__(self) -> None:
        frequencies = _frozen_array(self.frequencies_hz, float)
        terms = {name: _frozen_array(value, complex) for name, value in self.terms.items()}
        for name, value in terms.items():
            if value.shape != frequencies.shape:
                raise ValueError(f"error term {name} does not match the calibration grid")
        residuals = {name: _frozen_array(value, complex) for name, value in self.residuals.items()}
        for name, value in residuals.items():
            if value.shape[:1] != frequencies.shape:
                raise ValueError(f"residual model {name} does not match the calibration grid")
        object.__setattr__(self, "frequencies_hz", frequencies)
        object.__setattr__(self, "terms", MappingProxyType(terms))
        object.__setattr__(self, "residuals", MappingProxyType(residuals))


@dataclass(frozen=True)
class TerminationQualification:
    """The termination measured alone, against its VSWR limit."""

    name: str
    worst_vswr: float
    worst_frequency_hz: float
    limit_vswr: float
    #: Expanded (k = 2) uncertainty of |Γ| at the worst point, when it was evaluated.
    expanded_uncertainty: float | None = None

    @property
    def passed(self) -> bool:
        return self.worst_vswr <= self.limit_vswr

    def describe(self) -> str:
        outcome = "qualified" if self.passed else "REJECTED"
        return (
            f"{self.name}: worst VSWR {self.worst_vswr:.4f} at "
            f"{self.worst_frequency_hz / 1e6:.3f} MHz, limit {self.limit_vswr:.3f} -> {outcome}"
        )


@dataclass(frozen=True)
class DeviceIdentity:
    """The device under test as the operator or the batch list names it."""

    serial: str
    model: str


@dataclass(frozen=True)
class DeviceResult:
    """A device judged in every band."""

    device: DeviceIdentity
    bands: tuple[BandResult, ...]
    measured_utc: str
    extra: Mapping[str, str] = field(default_factory=dict)
    #: The qualified termination on the device's output while it was measured.
    termination: TerminationQualification | None = None
    #: What the bands judge, e.g. "as-terminated input reflection" or "S11 (ideal termination)".
    figure: str = "as-terminated input reflection"
    #: The readings at the sequence's named markers, anywhere in the sweep.
    markers: tuple[MarkerReading, ...] = ()

    @property
    def verdict(self) -> Verdict:
        return Verdict.combine(tuple(b.verdict for b in self.bands))


@dataclass(frozen=True)
class VerificationBand:
    """One band of a check-standard verification: measured |Γ| against the reference."""

    name: str
    start_hz: float
    stop_hz: float
    measured_reflection: float  # mean |Γ| over the band's points
    reference_reflection: float  # mean reference |Γ| over the same points
    worst_deviation: float  # | |Γ measured| - |Γ reference| | at the deciding point of the band
    worst_frequency_hz: float
    #: The largest accepted deviation there: the sequence's fixed tolerance, or under the En
    #: criterion sqrt(U_meas² + U_ref²) at that point.
    tolerance: float
    #: Normalized error, largest over the band (None: judged by a fixed tolerance).
    en: float | None = None
    measured_uncertainty: float | None = None  # U (k = 2) of the measured |Γ| at the deciding point
    reference_uncertainty: float | None = None  # U (k = 2) of the reference |Γ| there

    @property
    def passed(self) -> bool:
        if self.en is not None:
            return self.en <= 1.0
        return self.worst_deviation <= self.tolerance


@dataclass(frozen=True)
class VerificationResult:
    """A check standard measured with a calibration, judged band by band and over the sweep."""

    check_standard: str
    calibration_id: str
    measured_utc: str
    devices_before: int  # devices of the run measured before this check
    sweep_worst_deviation: float
    sweep_worst_frequency_hz: float
    tolerance: float
    bands: tuple[VerificationBand, ...]
    #: Normalized error, largest over the sweep (None: judged by a fixed tolerance).
    en: float | None = None
    #: What the check standard's control chart says of this check: None not judged (no
    #: baseline yet), () in control, else the rules it broke (see :mod:`lineproof.control_chart`).
    control_signals: tuple[str, ...] | None = None
    repeats: int = 1
    temperature_c: float | None = None
    #: Among the signals, a point beyond the control limits: the check fails.  Every other
    #: signal (a run rule, the precision chart) is a warning: the check passes, but the
    #: calibration no longer holds.
    beyond_limits: bool = False

    @property
    def agrees(self) -> bool:
        """The measured check standard agrees with its reference (En <= 1, or the tolerance)."""
        if self.en is not None:
            return self.en <= 1.0 and all(b.passed for b in self.bands)
        return self.sweep_worst_deviation <= self.tolerance and all(b.passed for b in self.bands)

    @property
    def passed(self) -> bool:
        """The check passed: it agrees with its reference and lies within its control limits
        (the results it covers stand)."""
        return self.agrees and not self.beyond_limits

    @property
    def in_control(self) -> bool:
        """No chart signal at all (or no chart yet): with :attr:`passed`, the calibration holds."""
        return not self.control_signals

    def describe(self) -> str:
        outcome = "passed" if self.passed else "FAILED"
        if self.passed and not self.in_control:
            outcome = "passed, but out of statistical control: the calibration is to be made again"
        figure = (f"En {self.en:.2f}" if self.en is not None else
                  f"largest deviation of |Γ| {self.sweep_worst_deviation:.4f} at "
                  f"{self.sweep_worst_frequency_hz / 1e6:.3f} MHz, tolerance {self.tolerance:.4f}")
        chart = ""
        if self.control_signals:
            chart = f"; out of control: {'; '.join(self.control_signals)}"
        elif self.control_signals is not None:
            chart = "; in control"
        return f"{self.check_standard}: {figure}{chart} -> {outcome}"
