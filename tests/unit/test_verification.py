"""Check standards: reference models, the normalized error En per band, the check-standard
definition in a sequence, and the history a store keeps of each figure."""

from __future__ import annotations

import math
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest
import skrf
from test_sequence import GOOD, write

from lineproof.check_history import HistoryKey, figure_name, history_keys, judge_new_points, load_chart
from lineproof.check_standards import ReferenceModel
from lineproof.control_chart import ChartPoint
from lineproof.run_checks import WARNINGS_BEFORE_HALT, CalibrationPolicy, check_problem, halt_reason
from lineproof.sequence import SequenceProblems, load_sequence
from lineproof.store import ResultStore
from lineproof.values import (
    BandLimit,
    CalibrationRecord,
    InstrumentIdentity,
    SweepPlan,
    VerificationBand,
    VerificationResult,
)
from lineproof.verification import (
    CheckReading,
    CheckReference,
    judge_check,
    normalized_error,
    reference_uncertainty,
)

BANDS = (BandLimit("2m", 144e6, 148e6, 1.10), BandLimit("70cm", 420e6, 450e6, 1.20))
F = np.linspace(100e6, 500e6, 201)


@pytest.mark.parametrize(("difference", "expanded", "en"), [
    # BIPM key comparison database, CCEM.RF-K5.c.CL (reflection coefficient S11 of PC-3.5 lines,
    # 33 GHz; read with the search tool): degrees of equivalence D_i with their 95 % expanded
    # uncertainties U_i, from its two tables -- METAS 0.0025 +- 0.0033 (consistent), LNE 0.031 +-
    # 0.011 (not).  U_i is already the uncertainty of the difference (both sides combined), so the
    # ratio D_i / U_i enters with U_ref = 0: this checks the ratio and the verdict, not how the
    # two uncertainties combine -- the next test does that.
    (0.0025, 0.0033, 0.0025 / 0.0033),
    (0.031, 0.011, 0.031 / 0.011),
])
def test_en_of_published_degrees_of_equivalence(difference: float, expanded: float, en: float) -> None:
    assert normalized_error(0.5 + difference, 0.5, expanded, 0.0) == pytest.approx(en)
    assert (en <= 1.0) == (difference == 0.0025)


def test_en_combines_both_uncertainties_in_quadrature() -> None:
    # En = (x - X) / sqrt(U_lab^2 + U_ref^2), both expanded: ISO 13528:2015 §9.7 (clause from
    # memory), as the NIST Dataplot reference manual's "ISO 13528 EN SCORE" page states the
    # formula (read with the search tool).  No published worked example giving both U_lab and
    # U_ref with the En they make could be found (searched: proficiency-test providers' pages,
    # the PTA and KAN guides, EA-4/21, key comparison reports), so the figures are by
    # construction: a 3-4-5 triangle gives exactly 1 in quadrature -- 1/1.4 = 0.71 for a plain
    # sum, 1.25 for the larger alone -- and the check's own judging uses the same function.
    assert normalized_error(1.0, 0.0, 0.6, 0.8) == pytest.approx(1.0)
    assert normalized_error(0.0, 1.0, 0.8, 0.6) == pytest.approx(1.0)
    assert normalized_error(0.5, 0.0, 0.6, 0.8) == pytest.approx(0.5)
    assert normalized_error(0.3, 0.3, 0.0, 0.0) == 0.0 and normalized_error(0.3, 0.2, 0.0, 0.0) == math.inf


def test_a_reference_model_agrees_with_scikit_rf() -> None:
    # The definition of the reflection coefficient: 100 ohm on 50 ohm is 1/3 (VSWR 2), 75 ohm 0.2.
    assert abs(ReferenceModel(100.0).reflection(F)).max() == pytest.approx(1 / 3)
    assert abs(ReferenceModel(75.0).reflection(F)).min() == pytest.approx(0.2)
    model = ReferenceModel(100.0, 0.5e-9, 0.3e-12)
    w = 2 * np.pi * F
    impedance = 1 / (1 / (100 + 1j * w * 0.5e-9) + 1j * w * 0.3e-12)
    expected = skrf.network.z2s(impedance[:, None, None], z0=50.0)[:, 0, 0]  # scikit-rf as the reference
    assert np.max(np.abs(model.reflection(F) - expected)) < 1e-14


def _reading(offsets: dict[str, float], spread: float = 0.0) -> tuple[CheckReading, CheckReference]:
    reference = np.full(F.shape, 1 / 3)
    measured = reference.copy()
    for band in BANDS:
        inside = (F >= band.start_hz) & (F <= band.stop_hz)
        measured[inside] += offsets.get(band.name, 0.0)
    repeats = np.array([measured - spread, measured, measured + spread])
    u = 0.008 + 0.004 * (F - F[0]) / (F[-1] - F[0])  # an uncertainty that grows with frequency
    return CheckReading(F, repeats, u), CheckReference(reference, reference_uncertainty(F, 0.006))


def test_en_is_judged_per_band_on_the_band_mean() -> None:
    reading, reference = _reading({"2m": 0.005, "70cm": -0.013}, spread=1e-4)
    result, points = judge_check("check", "cal-x", reading, reference, None, BANDS, 4)
    bands = {b.name: b for b in result.bands}
    for band in BANDS:
        inside = (F >= band.start_hz) & (F <= band.stop_hz)
        u_meas = float(np.mean(reading.expanded_uncertainty[inside]))
        offset = 0.005 if band.name == "2m" else -0.013
        assert bands[band.name].en == pytest.approx(abs(offset) / math.hypot(u_meas, 0.006))
        assert bands[band.name].tolerance == pytest.approx(math.hypot(u_meas, 0.006))
        assert points[band.name].value == pytest.approx(1 / 3 + offset)
        assert points[band.name].std_dev == pytest.approx(1e-4) and points[band.name].repeats == 3
    assert bands["2m"].passed and not bands["70cm"].passed
    assert result.en == bands["70cm"].en and not result.agrees and not result.passed
    assert result.sweep_worst_deviation == pytest.approx(0.013)


def test_a_fixed_tolerance_judges_the_largest_deviation() -> None:
    reading, reference = _reading({"70cm": 0.004})
    result, _ = judge_check("check", "cal-x", reading, CheckReference(reference.magnitude), 0.005, BANDS, 0)
    assert result.en is None and result.passed and result.tolerance == 0.005
    result, _ = judge_check("check", "cal-x", reading, CheckReference(reference.magnitude), 0.003, BANDS, 0)
    assert not result.passed and not result.bands[1].passed and result.bands[0].passed


def test_reference_uncertainty_pairs_are_interpolated() -> None:
    spread = reference_uncertainty(np.array([50e6, 100e6, 300e6, 900e6]), ((100e6, 0.002), (500e6, 0.006)))
    assert spread.tolist() == pytest.approx([0.002, 0.002, 0.004, 0.006])


# -- the definition in a sequence -------------------------------------------------------------

CHECK = '''[check_standard]
name = "check-75"
reference_vswr = 1.5
tolerance = 0.01
'''


def _with_check(table: str) -> str:
    assert CHECK in GOOD
    return GOOD.replace(CHECK, table)


def test_a_check_standard_with_a_model_and_an_uncertainty_loads(tmp_path: Path) -> None:
    spec = load_sequence(write(tmp_path, _with_check(
        '[check_standard]\nname = "check-75"\nreference_uncertainty = [[100e6, 0.003], [500e6, 0.005]]\n'
        'repeats = 3\nbaseline_checks = 12\n\n[check_standard.model]\nresistance_ohm = 75.0\n'
        'series_inductance_h = 0.2e-9\n')))
    check = spec.check_standard
    assert check is not None and check.criterion == "En" and check.repeats == 3 and check.baseline_checks == 12
    assert check.model == ReferenceModel(75.0, 0.2e-9, 0.0)
    assert check.reference_uncertainty == ((100e6, 0.003), (500e6, 0.005))
    assert load_sequence(write(tmp_path, GOOD, "plain.toml")).check_standard.criterion == "tolerance"


@pytest.mark.parametrize(("table", "key", "words"), [
    ('[check_standard]\nname = "check-75"\nreference_vswr = 1.5\n', "check_standard.tolerance",
     "say how a check is judged"),
    ('[check_standard]\nname = "check-75"\nreference_vswr = 1.5\ntolerance = 0.01\nreference_uncertainty = 0.004\n',
     "check_standard.tolerance", "not both"),
    ('[check_standard]\nname = "check-75"\nreference_uncertainty = 0.004\n', "check_standard.reference_file",
     "in one way"),
    ('[check_standard]\nname = "check-75"\nreference_vswr = 1.5\nreference_uncertainty = 1.5\n',
     "check_standard.reference_uncertainty", "from 0 to 1"),
    ('[check_standard]\nname = "check-75"\nreference_vswr = 1.5\nreference_uncertainty = [[1e8]]\n',
     "check_standard.reference_uncertainty", "not [frequency_hz, U]"),
    ('[check_standard]\nname = "check-75"\nreference_vswr = 1.5\ntolerance = 0.01\nrepeats = 0\n',
     "check_standard.repeats", "at least 1"),
    ('[check_standard]\nname = "check-75"\nreference_vswr = 1.5\ntolerance = 0.01\nbaseline_checks = 1\n',
     "check_standard.baseline_checks", "at least 2"),
])
def test_a_check_standard_definition_is_checked(tmp_path: Path, table: str, key: str, words: str) -> None:
    with pytest.raises(SequenceProblems) as caught:
        load_sequence(write(tmp_path, _with_check(table)))
    found = {p.key: p for p in caught.value.problems}
    assert key in found and words in found[key].problem and found[key].fix and found[key].line


# -- history ------------------------------------------------------------------------------------

def _record(store: ResultStore, value: float, cal: str, agrees: bool = True,
            baseline: int = 3) -> tuple[str, ...] | None:
    point = ChartPoint(value, 1e-4, 2, cal)
    said = judge_new_points(store, "bench", "SIM", "check-75", {"2m": point}, baseline, agrees)
    signals = said["2m"]
    result = VerificationResult("check-75", cal, "2026-01-01T00:00:00+00:00", 0, 0.0 if agrees else 0.02, 146e6,
                                0.01, (), control_signals=signals,
                                beyond_limits=signals is not None and "beyond the control limits" in signals)
    store.record_verification("run-1", result, "bench", "SIM", "tolerance", [{
        "calibration_id": cal, "station": "bench", "analyzer": "SIM", "check_standard": "check-75",
        "figure": figure_name("2m"), "measured_utc": result.measured_utc, "value": value, "std_dev": 1e-4,
        "repeats": 2, "reference": 0.2, "en": None, "temperature_c": 23.0,
        "signals": None if signals is None else "; ".join(signals)}])
    return signals


def test_the_history_is_kept_per_key_and_its_chart_recomputed_from_the_records(tmp_path: Path) -> None:
    with ResultStore(tmp_path / "results.sqlite") as store:
        store.start_run({"run_id": "run-1", "started_utc": "2026-01-01T00:00:00", "status": "running",
                         "sequence_name": "s", "station": "bench", "operator": "o", "software_version": "0",
                         "analyzer": "SIM", "resource": "r", "sweep_plan": "p"})
        f = np.linspace(1e8, 5e8, 3)
        for n in range(1, 7):
            store.save_calibration("run-1", CalibrationRecord(
                f"cal-{n}", "one-port", "kit", "ab" * 32, "2026-01-01T00:00:00+00:00",
                InstrumentIdentity("Maker", "SIM", "1", "1"), SweepPlan(1e8, 5e8, 3), 50.0, f,
                {"directivity": np.zeros(3, complex)}), "bench")
        said = [_record(store, 0.2001, "cal-1")]
        said.append(_record(store, 0.1990, "cal-1"))  # the same calibration again: not a second baseline point
        said.append(_record(store, 0.1999, "cal-2"))
        said.append(_record(store, 0.2300, "cal-3", agrees=False))  # disagreed with its reference: not in the baseline
        said += [_record(store, 0.2000, "cal-4"), _record(store, 0.2000, "cal-5"), _record(store, 0.2100, "cal-6")]
        assert said[:5] == [None] * 5
        assert said[5] == () and said[6] and "beyond the control limits" in said[6]
        key = HistoryKey("bench", "SIM", "check-75", figure_name("2m"))
        assert history_keys(store) == [key] and history_keys(store, figure="2m") == [key]
        assert history_keys(store, station="elsewhere") == []
        chart = load_chart(store, key)
        assert chart.baseline is not None and chart.baseline.count == 3
        assert chart.baseline.center == pytest.approx((0.2001 + 0.1999 + 0.2000) / 3)
        assert [j.signals for j in chart.judged][5:] == [(), said[6]]
        assert [chart.category(i) for i in range(7)] == ["baseline", "not judged", "baseline", "left out",
                                                         "baseline", "in control", "failed"]
        assert chart.status(6).startswith("OUT, failed: beyond the control limits")


# -- what a check means for its calibration ----------------------------------------------------

def _check(en: float = 0.3, signals: tuple[str, ...] | None = (), beyond: bool = False) -> VerificationResult:
    band = VerificationBand("2m", 144e6, 148e6, 0.3340, 0.3333, 0.001, 146e6, 0.0091, en)
    return VerificationResult("mismatch-2to1", "cal-1", "2026-01-01T01:00:00+00:00", 5, 0.001, 146e6, 0.0091,
                              (band,), en, control_signals=signals, beyond_limits=beyond)


def test_a_run_rule_or_precision_signal_warns_only_en_or_the_limits_fail() -> None:
    # The rule (see lineproof.control_chart): a check fails -- its results since the last
    # passing check become suspect -- on En > 1 or a point beyond the control limits; a run rule
    # or the precision chart is a warning: the check passes, the calibration no longer holds.
    cal = CalibrationRecord("cal-1", "one-port", "kit", "ab" * 32, "2026-01-01T00:00:00+00:00",
                            InstrumentIdentity("Maker", "SIM", "1", "1"), SweepPlan(1e8, 5e8, 3), 50.0,
                            np.linspace(1e8, 5e8, 3), {"directivity": np.zeros(3, complex)})
    now = datetime(2026, 1, 1, 1, 0, tzinfo=UTC)
    calm, baseline = _check(), _check(signals=None)
    trend = _check(signals=("70cm: 6 points in a row steadily rising or falling (Nelson test 3)",))
    spread = _check(signals=("2m: short-term standard deviation above its limit (precision chart)",))
    beyond = _check(signals=("2m: beyond the control limits",), beyond=True)
    disagrees = _check(en=1.4)
    for fine in (calm, baseline):
        assert fine.passed and fine.in_control and check_problem(fine) is None
        assert CalibrationPolicy().problem(cal, None, fine, now) is None
    for warned in (trend, spread):
        assert warned.passed and not warned.in_control
        assert "out of statistical control" in (check_problem(warned) or "")
        assert CalibrationPolicy().problem(cal, None, warned, now) == check_problem(warned)
        assert "passed, but out of statistical control" in warned.describe()
    for failed in (beyond, disagrees):
        assert not failed.passed and "its last check failed" in (check_problem(failed) or "")
        assert failed.describe().endswith("FAILED")


def test_a_failed_first_check_halts_and_so_do_warnings_that_outlast_new_calibrations() -> None:
    spread = _check(signals=("2m: short-term standard deviation above its limit (precision chart)",))
    beyond = _check(signals=("2m: beyond the control limits",), beyond=True)
    assert WARNINGS_BEFORE_HALT == 3
    # A warning has the calibration made again; the third in a row (two new calibrations each
    # warned at once) halts the run: it is not the calibration.
    assert halt_reason(spread, False, 1) is None and halt_reason(spread, True, 2) is None
    assert "out of statistical control again, 3 checks in a row" in (halt_reason(spread, True, 3) or "")
    assert halt_reason(_check(), True, 0) is None
    # A failed check halts only as a calibration's first: later, its results become suspect and
    # the calibration is made again.
    assert halt_reason(beyond, False, 0) is None and halt_reason(_check(en=1.4), False, 0) is None
    assert "failed verification after 5 device(s)" in (halt_reason(beyond, True, 0) or "")
