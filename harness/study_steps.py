"""The repeatability study as a step of a run (``do = "repeatability-study"``).

Each operator in turn (the run's own operator when the sequence names none) measures every
listed device, round after round, ``reconnections`` rounds -- disconnecting and connecting it
again for every reading, so that a device's readings are spread apart in time as well.  Each
reading is corrected and judged like a batch device (the termination's own mismatch in its
uncertainty), and the band's worst VSWR is kept.  The readings and, per band, the study's
figures (:mod:`lineproof.gauge_study`) are recorded in one transaction at the end; a study
that stopped starts again from its first reading when the run is resumed.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import UTC, datetime

import numpy as np

from lineproof import calibration, steps
from lineproof.gauge_study import METHOD, GaugeResult, anova, variance_components
from lineproof.journal import RunJournal
from lineproof.operators import ConsoleOperator, StopRequested
from lineproof.recording import MeasurementBasis, RunFacts
from lineproof.run_view import RunView
from lineproof.sequence import DeviceUnit, SequenceSpec
from lineproof.store import ResultStore
from lineproof.values import DeviceIdentity

FIGURE = "worst VSWR"


def study_lines(results: dict[str, GaugeResult]) -> list[str]:
    """The study's figures, one line per band, for a person."""
    lines = [f"{'band':<6} {'repeatability':>13} {'reproducibility':>15} {'GR&R':>9} {'devices':>9} "
             f"{'tolerance':>9}   share of tolerance (6 sigma / T): repeatability, reproducibility, GR&R"]
    for band, g in results.items():
        lines.append(f"{band:<6} {g.repeatability:>13.5f} {g.reproducibility:>15.5f} {g.gauge:>9.5f} "
                     f"{g.device_sd:>9.5f} {g.tolerance:>9.3f}   {100 * g.share(g.repeatability):.1f} %, "
                     f"{100 * g.share(g.reproducibility):.1f} %, {100 * g.share(g.gauge):.1f} %")
    return lines


def run_study(spec: SequenceSpec, measuring: steps.Station, basis: MeasurementBasis, store: ResultStore,
              journal: RunJournal, view: RunView, facts: RunFacts, person: object,
              stop_requested: Callable[[], bool]) -> dict[str, GaugeResult]:
    """Measure the study, record it, and return its figures per band."""
    assert spec.study is not None and spec.devices is not None and spec.termination is not None
    study, units, termination = spec.study, spec.devices.units, spec.termination.name
    operators = study.operators or (facts.operator,)
    readings = np.empty((len(units), len(operators), study.reconnections, len(spec.bands)))
    rows: list[dict[str, object]] = []
    for j, name in enumerate(operators):
        if len(operators) > 1 and isinstance(person, ConsoleOperator):
            person.acknowledge(f"Repeatability study: {name} takes over the bench now")
        for m in range(study.reconnections):
            view.step_started(f"study: {name}, round {m + 1} of {study.reconnections}", total=len(units))
            for i, unit in enumerate(units):
                if stop_requested():
                    raise StopRequested("stopped by Ctrl-C between readings")
                measuring.operator.connect(
                    measuring.port, unit.serial, termination,
                    f"{name}: connect {unit.model} s/n {unit.serial} to port {measuring.port}, its output on "
                    f"{termination} (reading {m + 1} of {study.reconnections}; disconnect it after)")
                frequencies, raw = measuring.measure_raw()
                corrected = calibration.correct_one_port(basis.calibration, frequencies, raw)
                spread = steps.device_uncertainty(measuring, basis.calibration, frequencies, corrected,
                                                  basis.termination_data)
                result = steps.judge(_device(unit), frequencies, corrected, spec.bands,
                                     spec.decision_rule, spread.expanded)  # type: ignore[arg-type]
                for b, band in enumerate(result.bands):
                    readings[i, j, m, b] = band.worst_vswr
                    rows.append({"run_id": facts.run_id, "serial": unit.serial, "operator": name, "repeat": m + 1,
                                 "band": band.limit.name, "figure": FIGURE, "value": band.worst_vswr,
                                 "measured_utc": result.measured_utc})
            view.step_finished("")
    results = {band.name: variance_components(anova(readings[:, :, :, b]), band.max_vswr - 1.0)
               for b, band in enumerate(spec.bands)}
    store.record_study(facts.run_id, rows, [_result_row(facts.run_id, band, g) for band, g in results.items()])
    journal.write("study-done", readings=len(rows), finished_utc=datetime.now(UTC).isoformat(timespec="seconds"))
    for line in study_lines(results):
        view.note(line)
    return results


def _device(unit: DeviceUnit) -> DeviceIdentity:
    return DeviceIdentity(unit.serial, unit.model)


def _result_row(run_id: str, band: str, g: GaugeResult) -> dict[str, object]:
    table = g.table
    return {"run_id": run_id, "band": band, "figure": FIGURE, "devices": table.devices,
            "operators": table.operators, "reconnections": table.replicates, "tolerance": g.tolerance,
            "repeatability_sd": g.repeatability, "reproducibility_sd": g.reproducibility, "gauge_sd": g.gauge,
            "part_sd": g.device_sd, "repeatability_share": g.share(g.repeatability),
            "reproducibility_share": g.share(g.reproducibility), "gauge_share": g.share(g.gauge), "method": METHOD}
