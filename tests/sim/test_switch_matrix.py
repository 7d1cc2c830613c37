"""The simulated switch matrix over SCPI/TCP through pyvisa-py: channel lists, what a closed
channel connects, and the switch paths' small, repeatable loss and mismatch."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import closing

import numpy as np
import pytest
import pyvisa
from error_model_reference import twelve_term_raw

from lineproof.drivers import open_analyzer
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient
from lineproof.values import SweepPlan

LOSS_DB = 0.05  # tests/scenarios/switch-bench.toml, per path at 1 GHz
MISMATCH = 0.002


@pytest.fixture
def bench(start_bench) -> SimulatedBench:
    return start_bench("switch-bench")


@pytest.fixture
def switch(bench: SimulatedBench) -> Iterator[pyvisa.resources.MessageBasedResource]:
    manager = pyvisa.ResourceManager("@py")
    link = manager.open_resource(bench.switch_resource, read_termination="\n", write_termination="\n", timeout=3000)
    yield link
    link.close()
    manager.close()


@pytest.fixture
def control(bench: SimulatedBench) -> Iterator[BenchControlClient]:
    with BenchControlClient(bench.control_address) as client:
        yield client


GRID = {"start_hz": 1e9, "stop_hz": 1e9, "points": 1}


def route(switch, command: str) -> None:
    """Send a routing command and wait until the switch has done it (*OPC?, IEEE 488.2 §10.18, from memory)."""
    assert switch.query(f"{command};*OPC?") == "1"


def test_identity_and_channel_lists(switch) -> None:
    assert switch.query("*IDN?") == "Tarnmoor Instruments,SIM-X24 switch matrix (simulated),SIMX777,1.0"
    switch.write("ROUTe:CLOSe (@1!2,2!1)")
    # SCPI-1999 Vol 1 §8.3.2: a range, then a list; one answer per channel, in order.
    assert switch.query("ROUTe:CLOSe? (@1!1:1!3,2!1)") == "0,1,0,1"
    switch.write("ROUT:OPEN (@1!2)")
    assert switch.query("ROUT:CLOS? (@1!2,2!1)") == "0,1"
    switch.write("ROUTe:OPEN:ALL")
    assert switch.query("ROUTe:CLOSe? (@2!1)") == "0"
    assert switch.query("SYSTem:ERRor?") == '0,"No error"'


@pytest.mark.parametrize("command, error", [
    ("ROUTe:CLOSe (@1!1:1!2)", '-221,"Settings conflict"'),  # two objects on port 1 at once
    ("ROUTe:CLOSe (@3!1)", '-222,"Data out of range"'),  # the switch has 2 modules
    ("ROUTe:CLOSe (@1!13)", '-222,"Data out of range"'),  # of 12 channels
    ("ROUTe:CLOSe (@1-3)", '-224,"Illegal parameter value"'),
    ("ROUTe:CLOSe 1!3", '-224,"Illegal parameter value"'),
    ("ROUTe:JOIN (@1!1)", '-113,"Undefined header"'),
])
def test_bad_routes_go_to_the_error_queue_and_change_nothing(switch, command: str, error: str) -> None:
    switch.write(command)
    assert switch.query("SYSTem:ERRor?") == error
    assert switch.query("ROUTe:CLOSe? (@1!1:1!12)") == ",".join(["0"] * 12)


def test_closing_a_channel_connects_its_object_through_a_repeatable_path(switch, control) -> None:
    short = control.truth_s(object="short", **GRID)["s11"]
    assert control.truth(1, **GRID)[0] == 1  # nothing connected: an open test port
    route(switch, "ROUTe:CLOSe (@1!2)")
    first = control.truth(1, **GRID)
    # Round trip through the path: |Γ| falls by twice its loss (in dB), give or take the
    # path's own small mismatch at each end (2 x 0.002 here).
    assert abs(first[0]) == pytest.approx(abs(short[0]) * 10 ** (-2 * LOSS_DB / 20), abs=2.5 * MISMATCH)
    route(switch, "ROUTe:OPEN (@1!2)")
    assert control.truth(1, **GRID)[0] == 1
    route(switch, "ROUTe:CLOSe (@1!2)")
    np.testing.assert_array_equal(control.truth(1, **GRID), first)  # repeatable: no random contact


def test_each_channel_has_its_own_path(switch, control) -> None:
    answers = []
    for channel, port in (("1!2", 1), ("2!1", 2)):
        route(switch, f"ROUTe:OPEN:ALL;:ROUTe:CLOSe (@{channel})")
        answers.append(control.truth(port, **GRID)[0])
    # The same short behind two paths: close, but not the same.  The paths' delays spread by
    # 2 ps (1-sigma): at 1 GHz a round trip turns the phase by 4π f Δτ, about 0.05 rad for
    # 4 ps, plus the paths' mismatches.
    assert answers[0] != answers[1] and abs(answers[0] - answers[1]) < 0.15


def test_thru_channel_joins_the_ports_with_two_path_losses(switch, control) -> None:
    route(switch, "ROUTe:CLOSe (@1!4)")
    s21 = control.truth_s(port=1, **GRID)["s21"][0]
    assert abs(s21) == pytest.approx(10 ** (-2 * LOSS_DB / 20), abs=1e-4)
    closed = control.request("switch")["closed"]
    assert closed == ["1!4"]


def test_raw_data_through_the_switch_is_the_twelve_term_model(bench: SimulatedBench, switch, control) -> None:
    plan = SweepPlan(100e6, 600e6, 201)
    with closing(open_analyzer(bench.visa_resource, "generic-scpi-analyzer")) as analyzer:
        analyzer.configure(plan)
        route(switch, "ROUTe:CLOSe (@1!8)")
        raw = analyzer.measure(["S11", "S21", "S12", "S22"])
        truth = control.truth_s(port=1)
        expected = twelve_term_raw(truth, control.error_terms(direction="forward"),
                                   control.error_terms(direction="reverse"))
    for name in ("S11", "S21", "S12", "S22"):
        np.testing.assert_allclose(raw[name], expected[name], atol=1e-12, err_msg=name)
    # and the device is really there: its own transmission, give or take two paths
    own = control.truth_s(object="TL30-0002")["s21"]
    assert np.max(np.abs(np.abs(truth["s21"]) - np.abs(own))) < 0.02


def test_device_slot_terminates_the_device_output(switch, control) -> None:
    route(switch, "ROUTe:CLOSe (@1!7)")
    through_switch = control.truth(1)
    device = control.truth_s(object="TL30-0001")
    load = control.truth_s(object="good-termination")["s11"]
    bare = device["s11"] + device["s12"] * device["s21"] * load / (1 - device["s22"] * load)  # Pozar eq. 12.3a
    assert np.max(np.abs(np.abs(through_switch) - np.abs(bare))) < 0.02


def test_operator_connection_is_not_undone_by_opening_the_channel(switch, control) -> None:
    route(switch, "ROUTe:CLOSe (@1!5)")
    control.connect(1, "short")
    route(switch, "ROUTe:OPEN (@1!5)")
    np.testing.assert_array_equal(control.truth(1, **GRID), control.truth_s(object="short", **GRID)["s11"])


def test_switch_faults(bench: SimulatedBench, switch, control) -> None:
    control.request("fault", instrument="switch", kind="error", code=-240, text="Hardware error", match="CLOS")
    route(switch, "ROUTe:CLOSe (@1!1)")
    assert switch.query("SYSTem:ERRor?") == '-240,"Hardware error"'
    control.request("fault", instrument="switch", kind="reset")
    assert switch.query("ROUTe:CLOSe? (@1!1)") == "0"  # power-on: every channel open
    assert control.truth(1, **GRID)[0] == 1
