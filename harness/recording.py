"""Recording a measured device: its Touchstone file with the full metadata header, its
database rows and its journal line -- in that order, so that a run killed at any moment
leaves either a whole record or a file that a resumed run sets aside and measures again.

The header carries everything DESIGN.md's "Records" asks for, each line behind the fixed
``!lineproof:`` tag (see :mod:`lineproof.touchstone`).
"""

from __future__ import annotations

import hashlib
import math
import os
import shutil
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np

from lineproof import metrics
from lineproof.figures import INSERTION_LOSS
from lineproof.journal import RunJournal
from lineproof.store import ResultStore
from lineproof.touchstone import format_one_port, format_two_port, write_new_file
from lineproof.values import (
    BandResult,
    CalibrationRecord,
    DeviceResult,
    FigureResult,
    InstrumentIdentity,
    SweepPlan,
    TerminationQualification,
    VerificationResult,
)

#: Where files of a device that was measured but never committed are set aside on resume.
SET_ASIDE = "uncommitted"
_PARTIAL_PREFIX = ".partial-"


@dataclass(frozen=True)
class RunFacts:
    """What is the same for every device of a run."""

    run_id: str
    software: str
    sequence_name: str
    sequence_file: str
    sequence_sha256: str
    station: str
    operator: str
    analyzer: InstrumentIdentity
    profile: str
    plan: SweepPlan
    reference_plane: str
    decision_rule: str
    #: The figures the verdicts are on (see :mod:`lineproof.figures`), and how a two-port run
    #: finds the as-terminated figure ("" in a one-port run, where it is measured).
    figures_judged: tuple[str, ...] = ("as-terminated",)
    as_terminated: str = ""
    #: Why lineproof chose the calibration method ("" when the sequence named it).
    method_chosen: str = ""


@dataclass(frozen=True)
class MeasurementBasis:
    """What a device's measurement rests on: the calibration, the qualified termination (None
    in a transmission-only run: the device's output is on analyzer port 2) and the last
    passing check of that calibration."""

    calibration: CalibrationRecord
    qualification: TerminationQualification | None
    qualification_id: int | None
    qualification_utc: str | None
    verification: VerificationResult | None = None
    verification_id: int | None = None
    #: The termination's measured trace and uncertainty (a ``steps.QualifiedTermination``).
    termination_data: Any = None
    #: Where the calibration came from when the sequence reused a stored one (None: made in this run).
    reused_from: str | None = None


@dataclass(frozen=True)
class RecordedDevice:
    result: DeviceResult
    position: int
    file: Path
    row: int


def _age_seconds(since_utc: str, until_utc: str) -> float:
    return (datetime.fromisoformat(until_utc) - datetime.fromisoformat(since_utc)).total_seconds()


def device_metadata(facts: RunFacts, basis: MeasurementBasis, result: DeviceResult, position: int,
                    uncertainty: np.ndarray | None, data: str | None = None) -> list[tuple[str, object]]:
    """The metadata header of one device's Touchstone file, in reading order (``data`` says
    what the file's data are, when they are not the as-terminated input reflection)."""
    plan, cal, q = facts.plan, basis.calibration, basis.qualification
    items: list[tuple[str, object]] = [
        ("software", facts.software),
        ("run.id", facts.run_id),
        ("sequence", facts.sequence_name),
        ("sequence.file", facts.sequence_file),
        ("sequence.sha256", facts.sequence_sha256),
        ("station", facts.station),
        ("operator", facts.operator),
        ("device.serial", result.device.serial),
        ("device.model", result.device.model),
        ("device.position", position),
        ("measured_utc", result.measured_utc),
        ("data", data or f"as-terminated input reflection, device output on {q.name if q else 'port 2'}"),
        ("reference_plane", facts.reference_plane),
        ("analyzer.identity", facts.analyzer.describe()),
        ("analyzer.resource", facts.analyzer.resource),
        ("analyzer.profile", facts.profile),
        ("sweep.start_hz", f"{plan.start_hz:.10g}"),
        ("sweep.stop_hz", f"{plan.stop_hz:.10g}"),
        ("sweep.points", plan.points),
        ("sweep.if_bandwidth_hz", f"{plan.if_bandwidth_hz:g}"),
        ("sweep.power_dbm", "instrument default" if plan.power_dbm is None else f"{plan.power_dbm:g}"),
        ("calibration.id", cal.calibration_id),
        ("calibration.method", cal.method),
        ("calibration.method_chosen_by", f"lineproof: {facts.method_chosen}" if facts.method_chosen else "the sequence"),
        ("calibration.kit", cal.kit_name),
        ("calibration.kit_sha256", cal.kit_hash),
        ("calibration.created_utc", cal.created_utc),
        ("calibration.age_s", f"{_age_seconds(cal.created_utc, result.measured_utc):.0f}"),
        ("calibration.reused", "no: made in this run" if basis.reused_from is None
         else f"yes: {basis.reused_from}"),
        ("calibration.interpolation_error", "none: on the sweep's own grid" if cal.interpolation_error is None
         else f"{cal.interpolation_error:.3g} (estimated; in the uncertainty)"),
    ]
    items += _termination_items(q, basis.qualification_utc)
    items += _verification_items(basis.verification, position)
    for band in result.bands:
        prefix = f"band.{band.limit.name}"
        items.append((f"{prefix}.range_hz", f"{band.limit.start_hz:.10g}..{band.limit.stop_hz:.10g}"))
        if band.worst_reflection is None:  # transmission only: its figures follow (_figure_items)
            items.append((f"{prefix}.verdict", band.verdict.value))
            continue
        items += [
            (f"{prefix}.limit_vswr", f"{band.limit.max_vswr:.3f}"),
            (f"{prefix}.worst_vswr", f"{band.worst_vswr:.4f}"),
            (f"{prefix}.worst_frequency_hz", f"{band.worst_frequency_hz:.10g}"),
            (f"{prefix}.mean_vswr", f"{band.mean_vswr:.4f}"),
            (f"{prefix}.worst_return_loss_db", f"{band.worst_return_loss_db:.2f}"),
            (f"{prefix}.expanded_uncertainty",
             "not evaluated" if band.expanded_uncertainty is None else f"{band.expanded_uncertainty:.5f}"),
            (f"{prefix}.worst_upper_vswr", "not evaluated" if band.worst_upper_reflection is None
             else f"{float(metrics.vswr_from_reflection(band.worst_upper_reflection)):.4f}"),
            (f"{prefix}.verdict", band.verdict.value),
        ]
    items += _figure_items(facts, result)
    items += _group_delay_items(result) + marker_items(result)
    transmission_only = bool(result.bands) and all(band.worst_reflection is None for band in result.bands)
    items += _transmission_uncertainty_items(uncertainty) if transmission_only else _uncertainty_items(uncertainty)
    items += sorted(result.extra.items())
    items += [("decision_rule", result.bands[0].decision_rule if result.bands else facts.decision_rule),
              ("verdict", result.verdict.value)]
    return items


def _termination_items(q: TerminationQualification | None, qualified_utc: str | None) -> list[tuple[str, object]]:
    if q is None:
        return [("termination.name", "none"), ("termination.worst_vswr", "not measured"),
                ("termination.result", "not used: transmission only, the device's output on analyzer port 2")]
    return [
        ("termination.name", q.name),
        ("termination.worst_vswr", f"{q.worst_vswr:.4f}"),
        ("termination.worst_frequency_hz", f"{q.worst_frequency_hz:.10g}"),
        ("termination.limit_vswr", f"{q.limit_vswr:.3f}"),
        ("termination.expanded_uncertainty",
         "not evaluated" if q.expanded_uncertainty is None else f"{q.expanded_uncertainty:.5f}"),
        ("termination.result", "qualified" if q.passed else "rejected"),
        ("termination.qualified_utc", qualified_utc),
    ]


def _verification_items(verification: VerificationResult | None, position: int) -> list[tuple[str, object]]:
    if verification is None:
        return [("verification.last", "none in this sequence")]
    return [
        ("verification.last.utc", verification.measured_utc),
        ("verification.last.check_standard", verification.check_standard),
        ("verification.last.worst_deviation", f"{verification.sweep_worst_deviation:.5f}"),
        ("verification.last.tolerance", f"{verification.tolerance:.5f}"),
        ("verification.last.result", "passed" if verification.passed else "failed"),
        *([("verification.last.en", f"{verification.en:.3f}")] if verification.en is not None else []),
        # devices measured after that check and before this one
        ("verification.last.devices_between", position - 1 - verification.devices_before),
    ]


#: How the uncertainty of every point is found (see :mod:`lineproof.uncertainty`).
UNCERTAINTY_METHOD = ("GUM (JCGM 100:2008) propagation of the kit's stated deviations, connector repeatability, "
                      "trace noise and the termination's own mismatch; EURAMET cg-12 v3.0 residual-error model")


def _uncertainty_items(uncertainty: np.ndarray | None) -> list[tuple[str, object]]:
    if uncertainty is None:
        return [("uncertainty", "not evaluated"), ("uncertainty.method", "none")]
    return [
        ("uncertainty", "expanded uncertainty of |reflection| at every point"),
        ("uncertainty.method", UNCERTAINTY_METHOD),
        ("uncertainty.coverage", "expanded, k = 2 (95.45 %), k from the distribution where a bounded term dominates"),
        ("uncertainty.max_reflection", f"{float(np.max(uncertainty)):.5f}"),
        ("uncertainty.mean_reflection", f"{float(np.mean(uncertainty)):.5f}"),
    ]


#: How the uncertainty of insertion loss corrected by a thru response is found.
NORMALIZATION_METHOD = ("thru response (normalization): the mismatch it leaves bounded from the analyzer's stated raw "
                        "source and load match and the device's match (passive bound, or as stated), U-shaped "
                        "(Harris and Warner 1981); the thru statement, its connection and trace noise; GUM (JCGM 100:2008)")


def _transmission_uncertainty_items(uncertainty: np.ndarray | None) -> list[tuple[str, object]]:
    if uncertainty is None:
        return [("uncertainty", "not evaluated"), ("uncertainty.method", "none")]
    return [
        ("uncertainty", "expanded uncertainty of insertion loss (dB) at every point"),
        ("uncertainty.method", NORMALIZATION_METHOD),
        ("uncertainty.coverage", "expanded, k = 2 (95.45 %), k from the distribution where a bounded term dominates"),
        ("uncertainty.max_db", f"{float(np.max(uncertainty)):.4f}"),
        ("uncertainty.mean_db", f"{float(np.mean(uncertainty)):.4f}"),
    ]


def _figure_items(facts: RunFacts, result: DeviceResult) -> list[tuple[str, object]]:
    """What the verdicts are on and, per band, every figure of a two-port measurement."""
    items: list[tuple[str, object]] = [("figure", result.figure), ("figures.judged", ", ".join(facts.figures_judged))]
    if facts.as_terminated:
        items.append(("figures.as_terminated", AS_TERMINATED_WAYS[facts.as_terminated]))
    for band in result.bands:
        for figure in band.figures if _own_keys(band) else ():  # one match figure: the band's own keys
            prefix = f"band.{band.limit.name}.{figure.figure}"
            items += [(f"{prefix}.{name}", value) for name, value in figure_texts(figure)]
    return items


_UNRESOLVED = "not resolved: the phase turns more than 90 degrees between sweep points (sweep more points)"


def _group_delay_items(result: DeviceResult) -> list[tuple[str, object]]:
    items: list[tuple[str, object]] = []
    for band in result.bands:
        if band.group_delay_s is not None:
            low, high = band.group_delay_s
            prefix = f"band.{band.limit.name}.group_delay"
            items += [(f"{prefix}.min_s", _UNRESOLVED if math.isnan(low) else f"{low:.6g}"),
                      (f"{prefix}.max_s", _UNRESOLVED if math.isnan(high) else f"{high:.6g}")]
    return items


def marker_items(result: DeviceResult) -> list[tuple[str, object]]:
    """Each marker's reading as metadata: where it was read, then what the data hold there."""
    items: list[tuple[str, object]] = []
    for marker in result.markers:
        prefix = f"marker.{marker.name}"
        items.append((f"{prefix}.frequency_hz", f"{marker.frequency_hz:.10g}"))
        if marker.requested_hz is not None:  # read at the sweep point nearest the named frequency
            items.append((f"{prefix}.requested_hz", f"{marker.requested_hz:.10g}"))
        if marker.reflection is not None:
            items += [(f"{prefix}.figure", marker.figure), (f"{prefix}.vswr", f"{marker.vswr:.4f}"),
                      (f"{prefix}.return_loss_db", f"{marker.return_loss_db:.2f}"),
                      (f"{prefix}.expanded_uncertainty", _or_none(marker.expanded_uncertainty, ".5f"))]
        if marker.insertion_loss_db is not None:
            items += [(f"{prefix}.insertion_loss_db", f"{marker.insertion_loss_db:.4f}"),
                      (f"{prefix}.insertion_loss_expanded_uncertainty_db",
                       _or_none(marker.insertion_loss_uncertainty_db, ".4f"))]
        if marker.phase_deg is not None:
            items += [(f"{prefix}.phase_deg", f"{marker.phase_deg:.3f}"),
                      (f"{prefix}.phase_expanded_uncertainty_deg", _or_none(marker.phase_uncertainty_deg, ".3f"))]
        if marker.group_delay_s is not None:
            resolved = not math.isnan(marker.group_delay_s)
            items += [(f"{prefix}.group_delay_s", f"{marker.group_delay_s:.6g}" if resolved else _UNRESOLVED),
                      (f"{prefix}.group_delay_expanded_uncertainty_s",
                       _or_none(marker.group_delay_uncertainty_s if resolved else None, ".3g"))]
    return items


def _or_none(value: float | None, spec: str) -> str:
    return "not evaluated" if value is None else format(value, spec)


def _own_keys(band: BandResult) -> bool:
    """Whether a band's figures are recorded each under its own keys: with more than one, or
    when the one there is is not a match figure (transmission only)."""
    return len(band.figures) > 1 or (band.worst_reflection is None and bool(band.figures))


#: How a two-port run found the as-terminated figure, as the records say it.
AS_TERMINATED_WAYS = {
    "computed": "computed from the S-parameters and the termination's measured reflection",
    "measured": "measured with the device's output on the termination",
}
#: Verdicts as numbers in ``band_metrics`` (whose values are numbers).
VERDICT_CODES = {"pass": 1.0, "indeterminate": 0.0, "fail": -1.0}
VERDICT_UNIT = "verdict: 1 pass, 0 indeterminate, -1 fail"


def figure_texts(figure: FigureResult) -> list[tuple[str, str]]:
    """One figure of one band as metadata values: VSWR for a match figure, dB for insertion loss."""
    if figure.figure == INSERTION_LOSS:
        shown = [("worst_db", figure.worst), ("mean_db", figure.mean), ("limit_db", figure.limit),
                 ("expanded_uncertainty_db", figure.expanded_uncertainty), ("worst_upper_db", figure.worst_upper)]
        texts = [(name, "none" if value is None else f"{value:.4f}") for name, value in shown]
    else:
        vswr = [("worst_vswr", figure.worst), ("mean_vswr", figure.mean), ("limit_vswr", figure.limit),
                ("worst_upper_vswr", figure.worst_upper)]
        texts = [(name, "none" if value is None else f"{float(metrics.vswr_from_reflection(value)):.4f}")
                 for name, value in vswr]
        texts.append(("expanded_uncertainty", "not evaluated" if figure.expanded_uncertainty is None
                      else f"{figure.expanded_uncertainty:.5f}"))
    texts.insert(1, ("worst_frequency_hz", f"{figure.worst_frequency_hz:.10g}"))
    texts.append(("verdict", figure.verdict.value if figure.verdict is not None else "not judged"))
    return texts


def band_metrics(result: DeviceResult) -> dict[tuple[str, str], tuple[float, str]]:
    """Further per-band figures kept in the database (``band_metrics``); with two-port data,
    each figure's worst, mean, where, uncertainty, limit and verdict (named ``<figure>.<what>``)."""
    found: dict[tuple[str, str], tuple[float, str]] = {}
    for band in result.bands:
        if band.worst_reflection is not None and band.mean_reflection is not None:
            found[(band.limit.name, "worst_mismatch_loss")] = (float(metrics.mismatch_loss_db(band.worst_reflection)),
                                                               "dB")
            found[(band.limit.name, "mean_return_loss")] = (float(metrics.return_loss_db(band.mean_reflection)), "dB")
            found[(band.limit.name, "worst_reflection")] = (band.worst_reflection, "1")
        for figure in band.figures if _own_keys(band) else ():
            unit = "dB" if figure.figure == INSERTION_LOSS else "1"
            values = {"worst": (figure.worst, unit), "mean": (figure.mean, unit),
                      "worst_frequency": (figure.worst_frequency_hz, "Hz"),
                      "expanded_uncertainty": (figure.expanded_uncertainty, unit), "limit": (figure.limit, unit),
                      "worst_upper": (figure.worst_upper, unit)}
            if figure.verdict is not None:
                values["verdict"] = (VERDICT_CODES[figure.verdict.value], VERDICT_UNIT)
            if unit == "1":
                values["worst_vswr"] = (float(metrics.vswr_from_reflection(figure.worst)), "ratio")
            found.update({(band.limit.name, f"{figure.figure}.{name}"): value for name, value in values.items()
                          if value[0] is not None})
        if band.group_delay_s is not None and not any(math.isnan(x) for x in band.group_delay_s):
            found[(band.limit.name, "group_delay.min")] = (band.group_delay_s[0], "s")
            found[(band.limit.name, "group_delay.max")] = (band.group_delay_s[1], "s")
    return found


class RunFolder:
    """``<records>/runs/<run id>/``: the run's Touchstone files, journal and sequence copy."""

    def __init__(self, records: Path, run_id: str) -> None:
        self.records = records
        self.path = records / "runs" / run_id

    def relative(self, path: Path, database: Path) -> str:
        """A path as the database keeps it: relative to the database's folder."""
        return Path(os.path.relpath(path, database.parent)).as_posix()

    def tidy(self, committed: set[str]) -> list[str]:
        """Before a run resumes: delete temporary files a kill left, and set aside any result
        file the database does not hold (it was written, then the run died before commit).
        Returns the names set aside."""
        if not self.path.is_dir():
            return []
        moved = []
        for entry in sorted(self.path.iterdir()):
            if entry.name.startswith(_PARTIAL_PREFIX) and entry.is_file():
                entry.unlink()
            elif entry.suffix.lower() in (".s1p", ".s2p") and entry.name not in committed:
                aside = self.path / SET_ASIDE
                aside.mkdir(exist_ok=True)
                target = aside / entry.name
                number = 1
                while target.exists():
                    number += 1
                    target = aside / f"{entry.stem}~{number}{entry.suffix}"
                shutil.move(str(entry), str(target))
                moved.append(entry.name)
        return moved


def record_device(store: ResultStore, journal: RunJournal, folder: RunFolder, facts: RunFacts,
                  basis: MeasurementBasis, result: DeviceResult, position: int, frequencies: np.ndarray,
                  corrected: np.ndarray, uncertainty: np.ndarray | None = None,
                  extra_metrics: Mapping[tuple[str, str], tuple[float, str]] | None = None, *,
                  arrays: Mapping[str, np.ndarray] | None = None, data: str | None = None) -> RecordedDevice:
    """Write the file (atomically, never over another), commit the rows, journal the commit.

    ``corrected`` is the as-terminated reflection (N,), written as ``.s1p``, or S-parameters
    (N, 2, 2), written as ``.s2p`` (``data`` then says what they are); ``uncertainty`` the
    headline figure's expanded uncertainty per point; ``arrays`` more per-point arrays kept
    with the device's row (each figure's uncertainty, the as-terminated trace)."""
    metadata = device_metadata(facts, basis, result, position, uncertainty, data)
    z0 = basis.calibration.reference_impedance_ohm
    two_port_data = np.ndim(corrected) == 3
    text = (format_two_port if two_port_data else format_one_port)(frequencies, corrected, z0, metadata)
    path = write_new_file(folder.path, result.device.serial, ".s2p" if two_port_data else ".s1p", text)
    digest = hashlib.sha256(text.encode("ascii")).hexdigest()
    row = store.record_device(
        facts.run_id, result, folder.relative(path, store.path), position=position,
        calibration_id=basis.calibration.calibration_id, qualification_id=basis.qualification_id,
        verification_id=basis.verification_id, file_sha256=digest, uncertainty=uncertainty,
        metrics={**band_metrics(result), **(extra_metrics or {})}, arrays=arrays,
    )
    journal.write("device-committed", serial=result.device.serial, position=position, file=path.name, row=row)
    return RecordedDevice(result, position, path, row)
