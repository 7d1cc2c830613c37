"""Against the simulated bench over real TCP through pyvisa-py: raw data follows the error
model, and after calibration the corrected reflection is the hidden truth."""

from __future__ import annotations

import numpy as np
import pytest
from error_model_reference import three_term_raw

from lineproof import steps
from lineproof.calkit import load_kit
from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.errors import RunHalted
from lineproof.operators import SimulatedOperator
from lineproof.simulators.control import BenchControlClient
from lineproof.values import BandLimit, DeviceIdentity, SweepPlan, Verdict

PLAN = SweepPlan(100e6, 500e6, 401)


def _terms(control: BenchControlClient) -> dict[str, np.ndarray]:
    reply = control.request("error_terms", port=1)["terms"]
    return {name: np.array(v["re"]) + 1j * np.array(v["im"]) for name, v in reply.items()}


def test_identity_over_visa(reflectometer: ProfiledAnalyzer) -> None:
    identity = reflectometer.identify()
    assert identity.manufacturer == "Tarnmoor Instruments" and identity.serial == "SIM0099"
    assert identity.resource.startswith("TCPIP::127.0.0.1::")


def test_raw_data_is_the_one_port_error_model_of_the_truth(reflectometer: ProfiledAnalyzer,
                                                            control: BenchControlClient) -> None:
    # The simulator writes the three-term closed form; the expectation is scikit-rf's cascade
    # of the error two-port with the truth (error_model_reference.three_term_raw).
    reflectometer.configure(PLAN)
    control.connect(1, "TM150-0001", "good-termination")
    raw = reflectometer.measure(["S11"])["S11"]
    truth = control.truth(1)
    terms = _terms(control)
    np.testing.assert_allclose(raw, three_term_raw(truth, terms), atol=1e-12)
    # and the raw magnitudes are those of an uncorrected analyzer, not tidy data
    assert 0.03 < np.median(np.abs(terms["directivity"])) < 0.15


def test_corrected_reflection_matches_hidden_truth(reflectometer: ProfiledAnalyzer, operator: SimulatedOperator,
                                                    control: BenchControlClient) -> None:
    reflectometer.configure(PLAN)
    identity = reflectometer.identify()
    station = steps.Station(reflectometer, operator, identity, PLAN)
    cal = steps.calibrate_one_port(station, load_kit("kits/n50-illustrative.toml"))
    for serial in ("TM150-0001", "TM150-0002", "TM150-0003"):
        operator.connect(1, serial, "good-termination", "")
        _, corrected = steps.measure_corrected(station, cal)
        truth = control.truth(1)
        # Foundation acceptance: within 1e-3 in |Γ| with noise off.
        assert np.max(np.abs(np.abs(corrected) - np.abs(truth))) < 1e-3
        # In fact the only error left is the kit model's low-loss approximation (< 1e-6).
        np.testing.assert_allclose(corrected, truth, atol=1e-6)


def test_poor_termination_is_refused(reflectometer: ProfiledAnalyzer, operator: SimulatedOperator) -> None:
    reflectometer.configure(PLAN)
    station = steps.Station(reflectometer, operator, reflectometer.identify(), PLAN)
    cal = steps.calibrate_one_port(station, load_kit("kits/n50-illustrative.toml"))
    good = steps.qualify_termination(station, cal, "good-termination")
    assert good.passed and good.worst_vswr < 1.02
    with pytest.raises(RunHalted, match="poor-termination failed qualification"):
        steps.qualify_termination(station, cal, "poor-termination")


def test_failing_unit_fails_its_band(reflectometer: ProfiledAnalyzer, operator: SimulatedOperator,
                                     control: BenchControlClient) -> None:
    reflectometer.configure(PLAN)
    station = steps.Station(reflectometer, operator, reflectometer.identify(), PLAN)
    cal = steps.calibrate_one_port(station, load_kit("kits/n50-illustrative.toml"))
    bands = (BandLimit("70cm", 420e6, 450e6, 1.2),)
    for serial, expected in (("TM150-0001", Verdict.PASS), ("TM150-0002", Verdict.FAIL)):
        result, f, _ = steps.measure_device(station, cal, DeviceIdentity(serial, "TM-150"), "good-termination",
                                            bands, "simple")
        truth_vswr = (1 + np.abs(control.truth(1))) / (1 - np.abs(control.truth(1)))
        in_band = (f >= 420e6) & (f <= 450e6)
        assert result.verdict is expected
        assert result.bands[0].worst_vswr == pytest.approx(truth_vswr[in_band].max(), abs=1e-6)
