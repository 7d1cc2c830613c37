"""The profiled switch against the simulated switch matrix (PROTOCOLS.md §4) over pyvisa-py:
what ``route`` claims is what the bench's truth says is connected, and every fault ends in
a clear error or a confirmed route -- never a silent misroute."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import closing
from pathlib import Path

import numpy as np
import pytest
from links import write_variant

from lineproof.drivers import open_analyzer, open_switch
from lineproof.drivers.switch import ProfiledSwitch
from lineproof.errors import InputError, InstrumentReported, LinkError, ReplyError
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient
from lineproof.values import SweepPlan


@pytest.fixture
def bench(start_bench: Callable[..., SimulatedBench]) -> SimulatedBench:
    return start_bench("switch-bench")  # tests/scenarios/switch-bench.toml, noise off


@pytest.fixture
def control(bench: SimulatedBench) -> Iterator[BenchControlClient]:
    with BenchControlClient(bench.control_address) as client:
        yield client


@pytest.fixture
def switch(bench: SimulatedBench, tmp_path: Path) -> Iterator[ProfiledSwitch]:
    # switch-bench.toml: 2 modules of 12 channels.
    profile = write_variant(tmp_path, "generic-scpi-switch", {"capabilities": {"modules": 2, "channels_per_module": 12},
                                                              "timing": {"command_timeout_s": 0.5}}, kind="switch")
    with closing(open_switch(bench.switch_resource, profile)) as opened:
        yield opened


def _closed(control: BenchControlClient) -> set[str]:
    return set(control.request("switch")["closed"])


def test_identity(switch: ProfiledSwitch) -> None:
    identity = switch.identify()
    assert (identity.manufacturer, identity.serial) == ("Tarnmoor Instruments", "SIMX777")


def test_route_closes_exactly_the_channels_asked(switch: ProfiledSwitch, control: BenchControlClient) -> None:
    switch.route(["1!1", "2!1"])
    assert _closed(control) == {"1!1", "2!1"} and set(switch.closed_channels()) == {"1!1", "2!1"}
    switch.route(["1!2"])
    assert _closed(control) == {"1!2"}
    switch.route([])
    assert _closed(control) == set()


def test_the_routed_object_is_what_the_analyzer_measures(bench: SimulatedBench, switch: ProfiledSwitch,
                                                         control: BenchControlClient) -> None:
    # One-port three-term model (Agilent AN 1287-3, from memory): Γm = e00 + e10e01·Γ/(1 − e11·Γ),
    # with Γ the truth at port 1's reference plane -- the load seen through the switch path.
    plan = SweepPlan(100e6, 1e9, 51)
    with closing(open_analyzer(bench.visa_resource, "generic-scpi-analyzer")) as analyzer:
        analyzer.configure(plan)
        switch.route(["1!3"])
        raw = analyzer.measure(["S11"])["S11"]
    grid = {"start_hz": plan.start_hz, "stop_hz": plan.stop_hz, "points": plan.points}
    truth = control.truth(1, **grid)
    terms = control.request("error_terms", port=1, at="last_sweep", **grid)["terms"]
    e = {name: np.array(v["re"]) + 1j * np.array(v["im"]) for name, v in terms.items()}
    np.testing.assert_allclose(raw, e["directivity"] + e["reflection_tracking"] * truth / (1 - e["source_match"] * truth),
                               rtol=0, atol=1e-12)


def test_a_channel_the_switch_lacks_is_refused_before_anything_is_sent(switch: ProfiledSwitch) -> None:
    sent = switch.session.last_command
    with pytest.raises(InputError, match="3!1 does not exist"):
        switch.route(["3!1"])
    with pytest.raises(InputError, match="module!channel"):
        switch.route(["13"])
    assert switch.session.last_command == sent


def test_a_route_the_switch_refuses_names_the_command(switch: ProfiledSwitch, control: BenchControlClient) -> None:
    # Two channels wired to analyzer port 1: the switch refuses (-221 Settings conflict).
    with pytest.raises(InstrumentReported) as caught:
        switch.route(["1!1", "1!2"])
    assert caught.value.code == -221 and "ROUTe:CLOSe (@1!1,1!2)" == caught.value.command


def _arm(control: BenchControlClient, kind: str, **fields: object) -> None:
    control.request("fault", instrument="switch", kind=kind, **fields)


def test_a_switch_reset_between_close_and_confirmation_is_caught(switch: ProfiledSwitch,
                                                                 control: BenchControlClient) -> None:
    _arm(control, "reset", match="CLOSe?")  # every channel opens before the read-back
    with pytest.raises(ReplyError) as caught:
        switch.route(["1!3"])
    text = str(caught.value)
    assert "not closed: 1!3" in text and "expected exactly 1!3 closed" in text and switch.resource in text


def test_switch_faults_end_in_a_confirmed_route_or_a_clear_error(switch: ProfiledSwitch,
                                                                 control: BenchControlClient) -> None:
    _arm(control, "drop", match="CLOSe?")
    switch.route(["1!5"])  # the read-back is a query: repeated on a fresh link
    assert _closed(control) == {"1!5"} and len(switch.recoveries) == 1
    _arm(control, "garbage", match="CLOSe?")
    with pytest.raises(ReplyError) as caught:
        switch.route(["1!6"])
    assert "CLOSe?" in caught.value.command
    _arm(control, "error", code=-240, text="Hardware error", match="OPEN")
    with pytest.raises(InstrumentReported, match="Hardware error") as reported:
        switch.route(["1!7"])
    assert reported.value.command == "ROUTe:OPEN:ALL"
    _arm(control, "stall", seconds=30, match="CLOSe?", count=3)
    with pytest.raises(LinkError, match="gave up after 3 attempts"):
        switch.route(["1!7"])
