"""The repeatability study end to end (sequences/repeatability-study.toml on the demo bench):
its figures against statsmodels on the same readings, and against the simulator's own
connector model."""

from __future__ import annotations

import json
import math
import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from statsmodels.formula.api import ols
from statsmodels.stats.anova import anova_lm

from lineproof.cli import main
from lineproof.simulators.scenario import load_scenario

ROOT = Path(__file__).parent.parent.parent
SEQUENCE = ROOT / "sequences" / "repeatability-study.toml"


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, str]:
    records = tmp_path_factory.mktemp("study") / "rec"
    assert main(["run", str(SEQUENCE), "--records", str(records)]) == 0
    with sqlite3.connect(records / "results.sqlite") as db:
        run_id, kind = db.execute("SELECT run_id, kind FROM runs").fetchone()
    assert kind == "repeatability-study"
    return records, run_id


def _rows(records: Path, sql: str) -> list[dict[str, object]]:
    with sqlite3.connect(records / "results.sqlite") as db:
        db.row_factory = sqlite3.Row
        return [dict(r) for r in db.execute(sql)]


def test_the_study_agrees_with_statsmodels_on_its_own_readings(study: tuple[Path, str]) -> None:
    records, _ = study
    readings = pd.DataFrame(_rows(records, "SELECT * FROM study_readings"))
    results = {str(r["band"]): r for r in _rows(records, "SELECT * FROM study_results")}
    assert sorted(results) == ["2m", "70cm"]
    for band, result in results.items():
        data = readings[readings.band == band]
        assert len(data) == 5 * 2 * 4 and result["devices"] == 5 and result["operators"] == 2
        # statsmodels: OLS ANOVA of the crossed design devices x operators, then the
        # variance components from its mean squares by the same expected-mean-square algebra.
        table = anova_lm(ols("value ~ C(serial) * C(operator)", data=data).fit(), typ=2)
        ms = table["sum_sq"] / table["df"]
        r, n, k = 4, 5, 2
        error = ms["Residual"]
        interaction = max(0.0, (ms["C(serial):C(operator)"] - error) / r)
        operators = max(0.0, (ms["C(operator)"] - ms["C(serial):C(operator)"]) / (n * r))
        devices = max(0.0, (ms["C(serial)"] - ms["C(serial):C(operator)"]) / (k * r))
        assert result["repeatability_sd"] == pytest.approx(math.sqrt(error), rel=1e-9)
        assert result["reproducibility_sd"] == pytest.approx(math.sqrt(operators + interaction), rel=1e-9, abs=1e-12)
        assert result["part_sd"] == pytest.approx(math.sqrt(devices), rel=1e-9)
        assert result["gauge_share"] == pytest.approx(6 * result["gauge_sd"] / result["tolerance"], rel=1e-12)
        assert result["tolerance"] == pytest.approx({"2m": 0.10, "70cm": 0.20}[band])


def test_the_repeatability_found_is_the_simulators_connector(study: tuple[Path, str]) -> None:
    # The demo bench connects with a fresh random reflection at every mating: magnitude uniform
    # on [0, a·f/1 GHz], phase uniform (simulated-instruments/analyzer_sim.py), so its
    # projection on a device's own reflection has standard deviation a·f/1 GHz/sqrt(6), and a
    # VSWR near 1 moves by 2/(1 - |Γ|)² times that.  Trace noise is two orders smaller.  The
    # study's repeatability (30 degrees of freedom: about 13 % sampling error) must find it.
    records, _ = study
    scenario = load_scenario("demo-bench")
    a = scenario.analyzer.connection_repeatability
    readings = pd.DataFrame(_rows(records, "SELECT * FROM study_readings"))
    results = {str(r["band"]): r for r in _rows(records, "SELECT * FROM study_results")}
    for band, centre_hz in (("2m", 146e6), ("70cm", 435e6)):
        gamma = (readings[readings.band == band].value.mean() - 1) / (readings[readings.band == band].value.mean() + 1)
        expected = 2 / (1 - gamma) ** 2 * a * centre_hz / 1e9 / math.sqrt(6)
        assert results[band]["repeatability_sd"] == pytest.approx(expected, rel=0.45)


def test_the_study_is_in_the_report(study: tuple[Path, str]) -> None:
    records, run_id = study
    assert main(["report", run_id, "--records", str(records)]) == 0
    folder = records / "runs" / run_id
    html = (folder / "report.html").read_text(encoding="utf-8")
    assert "Repeatability study" in html
    # Who measured: the study's own operators, named in its sequence.
    assert "<dt>operators (the study&#x27;s)</dt><dd>A. Tester, B. Tester; run started by " in html
    summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
    assert len(summary["repeatability_study"]["results"]) == 2
    assert len(summary["repeatability_study"]["readings"]) == 2 * 40
    assert np.isfinite([r["gauge_share"] for r in summary["repeatability_study"]["results"]]).all()
