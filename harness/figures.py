"""The figures a device is judged on, band by band, each with the uncertainty of every point.

A one-port run has one figure: the device's input reflection with its output on the
qualified termination (``as-terminated`` -- what the line will see).  Full S-parameters
(a one-path or SOLT calibration) give three more, as DESIGN.md asks ("also report insertion
loss and the device's match with an ideal termination"):

- ``input-match``: S11, the input match with an ideal termination on the output;
- ``output-match``: S22, the output match with an ideal source;
- ``insertion-loss``: -20 log10 |S21| (dB);

and the as-terminated figure is then either computed from them and the termination's
measured reflection, Γin = S11 + S21 S12 ΓL / (1 - S22 ΓL) (D. M. Pozar, Microwave
Engineering, eq. 12.3a), or measured directly with the device's output on the termination.

A sequence chooses which figures are judged; the others are reported beside them.  Match
figures are judged against the band's match limit (max VSWR, min return loss), insertion loss
against its max insertion loss; a figure with no limit in a band is reported there only.
"""

from __future__ import annotations

import math
from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass, replace
from datetime import UTC, datetime

import numpy as np

from lineproof import metrics, two_port
from lineproof.decision import RULE_TEXT, DecisionRule, judge_extremes
from lineproof.markers import MatchTrace, TransmissionTrace, band_group_delay, group_delay, read_markers
from lineproof.two_port_residuals import ThruView, through_path, thru_view
from lineproof.uncertainty import (
    UncertaintySettings,
    reflection_uncertainty,
    transmission_phase_uncertainty,
    transmission_relative_uncertainty,
)
from lineproof.values import (
    BandLimit,
    BandResult,
    CalibrationRecord,
    DeviceIdentity,
    DeviceResult,
    FigureResult,
    MarkerReading,
    TerminationQualification,
    Verdict,
)

AS_TERMINATED = "as-terminated"
INPUT_MATCH = "input-match"
OUTPUT_MATCH = "output-match"
INSERTION_LOSS = "insertion-loss"
FIGURES = (AS_TERMINATED, INPUT_MATCH, OUTPUT_MATCH, INSERTION_LOSS)
MATCH_FIGURES = (AS_TERMINATED, INPUT_MATCH, OUTPUT_MATCH)
#: What each figure is, in the words records and reports use.
DESCRIPTIONS = {
    AS_TERMINATED: "as-terminated input reflection",
    INPUT_MATCH: "S11 (device with an ideal termination, from full S-parameters)",
    OUTPUT_MATCH: "S22 (device output with an ideal source, from full S-parameters)",
    INSERTION_LOSS: "insertion loss, -20 log10 |S21| (dB)",
}
#: Judged unless a sequence says otherwise: what the line sees, and insertion loss where a
#: band limits it (a two-port measurement).
DEFAULT_JUDGED_ONE_PORT = (AS_TERMINATED,)
DEFAULT_JUDGED_TWO_PORT = (AS_TERMINATED, INSERTION_LOSS)
#: How a two-port run finds the as-terminated figure (sequence key ``as_terminated``).
AS_TERMINATED_WAYS = ("computed", "measured")


@dataclass(frozen=True, eq=False)
class FigureTrace:
    """One figure over the sweep: its values (|Γ|, or dB of insertion loss), their expanded
    uncertainty, and the complex reflection behind a match figure."""

    name: str
    values: np.ndarray
    expanded: np.ndarray | None
    reflection: np.ndarray | None = None


def figure_limit(name: str, band: BandLimit) -> float | None:
    """The band's limit for a figure (|Γ| or dB), or None when the band sets none."""
    if name == INSERTION_LOSS:
        return band.max_insertion_loss_db
    limit = band.max_reflection
    return None if limit >= 1.0 else limit


def _band_figure(trace: FigureTrace, frequencies: np.ndarray, band_points: slice, band: BandLimit,
                 rule: DecisionRule, judged: bool) -> FigureResult:
    values = trace.values[band_points]
    worst = int(values.argmax())
    limit = figure_limit(trace.name, band)
    u = upper = lower = None
    if trace.expanded is not None:
        u = float(trace.expanded[band_points].max())
        upper = float((values + trace.expanded[band_points]).max())
        lower = float((values - trace.expanded[band_points]).max())
    verdict = judge_extremes(float(values[worst]), limit, rule, upper, lower) if judged and limit is not None else None
    return FigureResult(trace.name, float(values[worst]), float(frequencies[band_points.start + worst]),
                        float(values.mean()), limit, u, upper, verdict)


def _band_result(band: BandLimit, frequencies: np.ndarray, traces: Sequence[FigureTrace], rule: DecisionRule,
                 judged: Collection[str], markers: Sequence[MarkerReading],
                 delays: np.ndarray | None) -> BandResult:
    indices = metrics.band_indices(frequencies, band)
    if indices.size == 0:
        raise ValueError(f"band {band.name} ({band.start_hz / 1e6:g}-{band.stop_hz / 1e6:g} MHz) holds no sweep point")
    points = slice(int(indices[0]), int(indices[-1]) + 1)  # a band is a run of sweep points
    figures = tuple(_band_figure(trace, frequencies, points, band, rule, trace.name in judged) for trace in traces)
    head = figures[0]
    loss = next((f for f in figures if f.figure == INSERTION_LOSS), None)
    verdict = Verdict.combine(tuple(f.verdict for f in figures if f.verdict is not None))
    match = head.figure in MATCH_FIGURES  # else transmission-only data: no reflection headline
    inside = tuple(m for m in markers if band.start_hz <= m.frequency_hz <= band.stop_hz)
    return BandResult(
        band, head.worst if match else None, head.worst_frequency_hz, head.mean if match else None,
        head.expanded_uncertainty if match else None, verdict, RULE_TEXT[rule], head.worst_upper if match else None,
        None if loss is None else loss.worst, None if loss is None else loss.worst_frequency_hz,
        None if loss is None else loss.expanded_uncertainty, inside, figures,
        None if delays is None else band_group_delay(frequencies, delays, band))


def judge_figures(device: DeviceIdentity, frequencies: np.ndarray, traces: Sequence[FigureTrace],
                  bands: Sequence[BandLimit], rule: DecisionRule, judged: Collection[str], *,
                  markers: Mapping[str, float] | None = None, termination: TerminationQualification | None = None,
                  extra: Mapping[str, str] | None = None, description: str | None = None,
                  transmission: TransmissionTrace | None = None) -> DeviceResult:
    """Each band's figures (``traces``, the headline match figure first) with the verdicts of
    those ``judged`` under ``rule``; the band's verdict combines them (the rule's text goes
    into every band result).  The named ``markers`` are read (:mod:`lineproof.markers`), and
    with ``transmission`` (S21 and its uncertainties) each band's group delay is recorded."""
    head = traces[0]
    match = MatchTrace(head.name, head.values, head.expanded) if head.name in MATCH_FIGURES else None
    if transmission is None:
        loss = next((t for t in traces if t.name == INSERTION_LOSS), None)
        readings = read_markers(frequencies, markers or {}, match, None)
        if loss is not None:  # insertion loss without S21 itself (a library call): as it is
            readings = tuple(replace(m, insertion_loss_db=float(loss.values[metrics.marker_index(frequencies,
                                     m.frequency_hz)])) for m in readings)
        delays = None
    else:
        readings = read_markers(frequencies, markers or {}, match, transmission)
        delays = group_delay(frequencies, transmission)[0] if frequencies.size > 1 else None
    results = tuple(_band_result(band, frequencies, traces, rule, judged, readings, delays) for band in bands)
    return DeviceResult(device, results, datetime.now(UTC).isoformat(timespec="seconds"), dict(extra or {}),
                        termination, description or DESCRIPTIONS[traces[0].name], readings)


def headline_first(traces: Sequence[FigureTrace], judged: Collection[str]) -> list[FigureTrace]:
    """The traces with the headline first: the first judged match figure (as-terminated,
    input match, output match), else the first match figure there is (transmission-only
    data have none: their order stands)."""
    matches = [t for t in traces if t.name in MATCH_FIGURES]
    if not matches:
        return list(traces)
    head = next((t for t in matches if t.name in judged), matches[0])
    return [head] + [t for t in traces if t is not head]


# -- two-port figures --------------------------------------------------------------------------


def thru_views(cal: CalibrationRecord) -> dict[str, ThruView]:
    """How the thru carries the residuals into each direction's corrected reflection: the same
    for every device a calibration corrects, so a run makes it once per calibration."""
    return {name: thru_view(cal.residuals, cal.terms[f"{direction}.load_match"], _prefix(cal, name) == "port2")
            for name, direction in ((INPUT_MATCH, "forward"), (OUTPUT_MATCH, "reverse"))}


def _prefix(cal: CalibrationRecord, name: str) -> str:
    """The residual model of the port a match figure was measured at (a one-path calibration
    measured the output at port 1, with the forward terms as the reverse ones)."""
    prefix = "port1" if name == INPUT_MATCH else "port2"
    return prefix if f"{prefix}.variance" in cal.residuals else "port1"


def two_port_figures(cal: CalibrationRecord, frequencies: np.ndarray, s: two_port.Traces,
                     settings: UncertaintySettings, termination: tuple[np.ndarray, np.ndarray] | None = None,
                     views: Mapping[str, ThruView] | None = None) -> list[FigureTrace]:
    """Input match, output match and insertion loss of corrected traces ``s`` (S11, S21, S12,
    S22), and -- with ``termination`` (its measured reflection and the standard uncertainty
    of that, on this grid) -- the as-terminated figure computed from them.  ``views``: the
    calibration's :func:`thru_views` when made already."""
    s11, s21, s12, s22 = s
    views = views or thru_views(cal)
    product = s21 * s12
    through = np.abs(s21)
    relative = transmission_relative_uncertainty(cal.residuals, s11, s21, s22, settings, s21_magnitude=through)
    if cal.interpolation_error:  # a reused calibration moved onto this sweep: its estimate, of unknown phase
        relative = np.hypot(relative, cal.interpolation_error / math.sqrt(2))
    found = [_match(cal, frequencies, s11, s22, product, settings, INPUT_MATCH, views[INPUT_MATCH]),
             _match(cal, frequencies, s22, s11, product, settings, OUTPUT_MATCH, views[OUTPUT_MATCH]),
             FigureTrace(INSERTION_LOSS, metrics.insertion_loss_db(through),
                         (settings.coverage_factor or 2.0) * 20 / math.log(10) * relative)]
    if termination is not None:
        found.insert(0, computed_as_terminated(cal, frequencies, s, settings, termination, relative,
                                               views[INPUT_MATCH]))
    return found


def transmission_trace(cal: CalibrationRecord, s: two_port.Traces, settings: UncertaintySettings,
                       found: Sequence[FigureTrace]) -> TransmissionTrace:
    """S21 of corrected traces ``s`` with the uncertainty of its insertion loss (that of the
    ``insertion-loss`` figure among ``found``) and of its phase (k = 2, as for insertion loss)."""
    s11, s21, _, s22 = s
    loss = next((t.expanded for t in found if t.name == INSERTION_LOSS), None)
    phase = transmission_phase_uncertainty(cal.residuals, s11, s21, s22, settings, cal.interpolation_error)
    return TransmissionTrace(s21, loss, (settings.coverage_factor or 2.0) * phase)


def _match(cal: CalibrationRecord, frequencies: np.ndarray, gamma: np.ndarray, far: np.ndarray, product: np.ndarray,
           settings: UncertaintySettings, name: str, thru: ThruView) -> FigureTrace:
    """S11 (port 1, forward load match) or S22 (port 2 and the reverse load match)."""
    prefix = _prefix(cal, name)
    direction = "forward" if name == INPUT_MATCH else "reverse"
    path = through_path(cal.residuals, product, far, cal.terms[f"{direction}.load_match"], thru=thru)
    spread = reflection_uncertainty(cal.residuals, gamma, frequencies, settings, prefix=prefix,
                                    interpolation_error=cal.interpolation_error, transmission=path)
    return FigureTrace(name, spread.magnitude, spread.expanded, gamma)


def computed_as_terminated(cal: CalibrationRecord, frequencies: np.ndarray, s: two_port.Traces,
                           settings: UncertaintySettings, termination: tuple[np.ndarray, np.ndarray],
                           transmission_relative: np.ndarray, thru: ThruView | None = None) -> FigureTrace:
    """Γin = S11 + S21 S12 ΓL / (1 - S22 ΓL) with the termination's measured ΓL.

    Its uncertainty: that of S11 (the calibration's residuals, the residual load match through
    S21 S12, connection, noise), taken along Γin; what is known of ΓL -- the standard
    uncertainty u of measuring it and a fresh mating of the termination on the device's output
    (connector repeatability c, of unknown phase: c/√2) -- through |∂Γin/∂ΓL| = |S21 S12| / |1 -
    S22 ΓL|²; and the relative uncertainty of S21 S12 (twice that of |S21|) times
    |S21 S12 ΓL / (1 - S22 ΓL)|.  First order; the error of S22 enters only with ΓL² and is left out."""
    s11, s21, s12, s22 = s
    load, load_u = termination
    product = s21 * s12
    denominator = 1 - s22 * load
    through_load = product * load / denominator
    gamma_in = s11 + through_load
    knowledge = np.sqrt(np.asarray(load_u) ** 2 + settings.repeatability(frequencies) ** 2 / 2)
    further = {"termination (as measured)": np.abs(product) / np.abs(denominator) ** 2 * knowledge,
               "transmission through the termination": 2 * transmission_relative * np.abs(through_load)}
    path = through_path(cal.residuals, product, s22, cal.terms["forward.load_match"], thru=thru)
    spread = reflection_uncertainty(cal.residuals, s11, frequencies, settings, reading=gamma_in,
                                    interpolation_error=cal.interpolation_error, transmission=path, further=further)
    return FigureTrace(AS_TERMINATED, spread.magnitude, spread.expanded, gamma_in)
