"""One behaviour suite for every transport (``link`` runs each test over each one): what the
profiled analyzer returns is checked against the simulated bench's hidden truth.

The one-port error model used as the check is the three-term model (Agilent AN 1287-3,
from memory): Γm = e00 + e10e01·Γ / (1 − e11·Γ).  SCPI-1999 command names are cited from memory.
"""

from __future__ import annotations

import numpy as np
import pytest
from links import DriverBench

from lineproof.errors import InputError, InstrumentError, InstrumentReported
from lineproof.values import SweepPlan

PLAN = SweepPlan(100e6, 500e6, 401)


def _model_of_truth(link: DriverBench, plan: SweepPlan, port: int = 1) -> np.ndarray:
    grid = {"start_hz": plan.start_hz, "stop_hz": plan.stop_hz, "points": plan.points}
    truth = link.control.truth(port, **grid)
    terms = link.control.request("error_terms", port=port, **grid)["terms"]
    e = {name: np.array(v["re"]) + 1j * np.array(v["im"]) for name, v in terms.items()}
    return e["directivity"] + e["reflection_tracking"] * truth / (1 - e["source_match"] * truth)


def test_identity(link: DriverBench) -> None:
    identity = link.analyzer().identify()
    # ideal-bench.toml: "Tarnmoor Instruments,SIM-R1 reflectometer (simulated),SIM0099,1.0"
    assert (identity.manufacturer, identity.serial, identity.firmware) == ("Tarnmoor Instruments", "SIM0099", "1.0")
    assert identity.resource == link.resource


def test_raw_trace_is_the_error_model_of_the_truth(link: DriverBench) -> None:
    analyzer = link.analyzer()
    link.control.connect(1, "TM150-0002", "good-termination")
    analyzer.configure(PLAN)
    sweep = analyzer.measure(["S11"])
    np.testing.assert_array_equal(sweep.frequencies_hz, PLAN.frequencies())
    np.testing.assert_allclose(sweep["S11"], _model_of_truth(link, PLAN), rtol=0, atol=link.kind.data_tolerance)


@pytest.mark.analyzer_settings(max_points=50)
def test_a_sweep_beyond_max_points_is_segmented_and_stitched_invisibly(link: DriverBench) -> None:
    analyzer = link.analyzer(capabilities={"max_points": 50})
    link.control.connect(1, "TM150-0001", "poor-termination")
    plan = SweepPlan(100e6, 500e6, 401)
    before = link.control.request("status")["sweeps"]
    analyzer.configure(plan)
    sweep = analyzer.measure(["S11"])
    # 401 points in at most 50 per sweep: ceil(401 / 50) = 9 sweeps of 44 or 45 points.
    assert link.control.request("status")["sweeps"] - before == 9
    np.testing.assert_array_equal(sweep.frequencies_hz, plan.frequencies())
    np.testing.assert_allclose(sweep["S11"], _model_of_truth(link, plan), rtol=0, atol=link.kind.data_tolerance)
    # and the next measurement starts again from the first segment
    np.testing.assert_array_equal(analyzer.measure(["S11"])["S11"], sweep["S11"])


def test_a_setting_the_instrument_refuses_names_the_command(link: DriverBench) -> None:
    # The profile claims 6 GHz; the simulated analyzer stops at 3 GHz (ideal-bench.toml).
    analyzer = link.analyzer(capabilities={"frequency_max_hz": 6e9})
    with pytest.raises(InstrumentReported) as caught:
        analyzer.configure(SweepPlan(1e9, 5e9, 11))
    error = caught.value
    assert error.resource == link.resource and "5000000000" in error.command
    assert error.text  # the instrument's own message: SCPI -222 "Data out of range", §2 code 21


def test_measuring_before_configuring_or_an_unknown_parameter_is_refused(link: DriverBench) -> None:
    # A refused query is told from a slow one only by its timeout: keep it short here.
    analyzer = link.analyzer(timing={"command_timeout_s": 0.3})
    with pytest.raises(InputError, match="configure"):
        analyzer.measure(["S11"])
    analyzer.configure(SweepPlan(100e6, 200e6, 11))
    with pytest.raises(InputError, match=r"cannot measure S22"):
        analyzer.measure(["S22"])
    if analyzer.capabilities.corrected_data:
        # The simulated analyzer has no internal calibration and refuses the query (-224):
        # it does not answer, and its error queue says why.
        with pytest.raises(InstrumentReported) as caught:
            analyzer.measure(["S11"], corrected=True)
        assert caught.value.code == -224 and "CORR" in caught.value.command
    else:
        with pytest.raises(InputError, match="no corrected data"):
            analyzer.measure(["S11"], corrected=True)


def test_reset_returns_to_power_on_and_asks_for_a_new_configuration(link: DriverBench) -> None:
    analyzer = link.analyzer()
    analyzer.configure(SweepPlan(100e6, 200e6, 11))
    analyzer.reset()
    with pytest.raises(InputError, match="configure"):
        analyzer.measure(["S11"])
    analyzer.configure(PLAN)
    assert analyzer.measure(["S11"])["S11"].size == PLAN.points


def test_a_slow_reset_is_waited_for_as_long_as_the_profile_says(visa_link: DriverBench) -> None:
    # *RST has no reply: its time shows in the *OPC? after it, here 1 s -- longer than the
    # command timeout, within the reset's own timeout_s (DEVELOPERS.md worked example 1).
    link = visa_link
    analyzer = link.analyzer(timing={"command_timeout_s": 0.3, "retries": 0},
                             operations={"reset": {"send": "*RST", "timeout_s": 5}})
    link.arm("stall", seconds=1.0, match="*OPC?")
    analyzer.reset()
    assert link.fired() == ["*OPC?"] and analyzer.recoveries == []


@pytest.mark.analyzer_settings(time_scale=1.0)
def test_the_sweep_timeout_scales_with_the_sweep_not_the_command_timeout(link: DriverBench) -> None:
    # 201 points at 1 kHz IF bandwidth take 0.2 s plus per-point time (simulated in real
    # time here); the command timeout of 0.1 s would cut a fixed-timeout wait short.
    analyzer = link.analyzer(timing={"command_timeout_s": 0.1, "retries": 0})
    analyzer.configure(SweepPlan(100e6, 200e6, 201, if_bandwidth_hz=1000.0))
    assert analyzer.measure(["S11"])["S11"].size == 201
    assert analyzer.recoveries == []


POLLED_WAIT = {"wait": {"send": "*ESR?", "reply": "status", "arm": "*OPC", "done_bits": 1}}


@pytest.mark.analyzer_settings(time_scale=1.0)
def test_a_polled_wait_holds_the_read_until_the_sweep_ends(visa_link: DriverBench) -> None:
    # *OPC, then *ESR? until bit 0 (IEEE 488.2 §12.5.2).  The sweep takes 0.2 s in real time
    # and the read's timeout is 0.1 s: a read sent before the sweep ends would time out.
    link = visa_link
    analyzer = link.analyzer(timing={"command_timeout_s": 0.1, "retries": 0}, operations=POLLED_WAIT)
    link.control.connect(1, "TM150-0002", "good-termination")
    plan = SweepPlan(100e6, 500e6, 201, if_bandwidth_hz=1000.0)
    analyzer.configure(plan)
    sweep = analyzer.measure(["S11"])
    np.testing.assert_allclose(sweep["S11"], _model_of_truth(link, plan), rtol=0, atol=link.kind.data_tolerance)
    assert analyzer.recoveries == []


def test_a_reset_is_told_even_when_a_polled_wait_read_the_power_on_bit(visa_link: DriverBench) -> None:
    link = visa_link
    analyzer = link.analyzer(timing={"command_timeout_s": 0.4}, operations=POLLED_WAIT)
    analyzer.configure(PLAN)
    link.arm("reset", match="INIT")  # a power glitch just before the trigger
    with pytest.raises(InstrumentError, match="Power On bit"):
        analyzer.measure(["S11"])


@pytest.mark.parametrize(
    ("data_format", "byte_order", "scpi", "reply", "rtol"),
    [
        # SCPI-1999 Vol 2 FORMat:DATA and FORMat:BORDer; REAL,32 keeps a 24-bit significand
        # (IEEE 754 single: relative rounding 6e-8), ASCii the simulator's 12 digits.
        ("REAL,64", "big", "FORMat:DATA REAL,64;:FORMat:BORDer NORMal", "block", 0),
        ("REAL,32", "big", "FORMat:DATA REAL,32;:FORMat:BORDer NORMal", "block", 1.2e-7),
        ("REAL,32", "little", "FORMat:DATA REAL,32;:FORMat:BORDer SWAPped", "block", 1.2e-7),
        ("ASCII", "big", "FORMat:DATA ASCii", "numbers", 1e-11),
    ],
)
def test_every_scpi_data_format_gives_the_same_trace(visa_link: DriverBench, data_format: str, byte_order: str,
                                                     scpi: str, reply: str, rtol: float) -> None:
    link = visa_link
    link.control.connect(1, "TM150-0003", "good-termination")
    plan = SweepPlan(1e6, 3e9, 1601)
    variant = link.analyzer(
        capabilities={"data_format": data_format, "byte_order": byte_order},
        operations={"set_data_format": scpi, "read_raw": {"send": "TRACe:DATA? RAW", "reply": reply},
                    "read_corrected": {"send": "TRACe:DATA? CORRected", "reply": reply},
                    "read_frequencies": {"send": "SENSe:FREQuency:DATA?", "reply": reply}},
    )
    variant.configure(plan)
    expected = _model_of_truth(link, plan)
    np.testing.assert_allclose(variant.measure(["S11"])["S11"], expected, rtol=rtol, atol=1e-15)
