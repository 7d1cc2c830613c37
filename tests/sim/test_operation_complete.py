"""``*OPC`` on the simulated SCPI analyzer, seen through pyvisa-py (PROTOCOLS.md §1): the
Operation Complete bit of ``*ESR?`` reads 1 only once the pending sweep would have ended
(IEEE 488.2 §12.5.2, from memory), reading clears it, ``*CLS`` cancels it."""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import pyvisa

from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.scenario import load_scenario

IDEAL = Path(__file__).parent.parent / "scenarios" / "ideal-bench.toml"


@pytest.fixture
def link() -> Iterator[pyvisa.resources.MessageBasedResource]:
    scenario = load_scenario(IDEAL)
    spec = scenario.analyzers[0]
    # Sweeps take their simulated time in real time here.
    scenario.analyzers[0] = dataclasses.replace(spec, settings=dataclasses.replace(spec.settings, time_scale=1.0))
    bench = SimulatedBench(scenario).start()
    manager = pyvisa.ResourceManager("@py")
    try:
        resource = manager.open_resource(bench.visa_resource, read_termination="\n", write_termination="\n",
                                         timeout=5000)
        yield resource
        resource.close()
    finally:
        manager.close()
        bench.stop()


def test_the_operation_complete_bit_waits_for_the_sweep(link: pyvisa.resources.MessageBasedResource) -> None:
    assert link.query("*ESR?") == "128"  # Power On, read once
    # 1001 points at 1 kHz IF bandwidth: a sweep of a little over 1 s.
    link.write("SENSe:SWEep:POINts 1001;:SENSe:BANDwidth 1000")
    link.write("INITiate:IMMediate;*OPC")
    assert int(link.query("*ESR?")) & 1 == 0  # asked at once, a second before the sweep ends
    reads = 1
    deadline = time.monotonic() + 10
    while not int(link.query("*ESR?")) & 1:
        assert time.monotonic() < deadline
        reads += 1
        time.sleep(0.05)
    assert reads > 1 and link.query("*ESR?") == "0"  # reading cleared it
    link.write("*OPC")
    assert link.query("*ESR?") == "1"  # nothing pending: complete at once


def test_clear_status_cancels_a_pending_operation_complete(link: pyvisa.resources.MessageBasedResource) -> None:
    link.write("SENSe:SWEep:POINts 11;:SENSe:BANDwidth 1000")
    link.write("INITiate:IMMediate;*OPC;*CLS")
    time.sleep(0.1)  # the 11 ms sweep is over
    assert link.query("*ESR?") == "0"
