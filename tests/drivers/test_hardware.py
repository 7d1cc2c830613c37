"""The same driver checks against a real instrument, skipped unless one is named:

    LINEPROOF_HARDWARE_RESOURCE=TCPIP::192.168.1.20::5025::SOCKET \\
    LINEPROOF_HARDWARE_PROFILE=my-analyzer.toml \\
    LINEPROOF_HARDWARE_TRANSPORT=visa \\
    .venv/bin/python -m pytest -m hardware tests/drivers/test_hardware.py

Only harmless operations: identify, a small sweep inside the profile's range, a read-back.
Connect nothing that could be harmed by the analyzer's default source power.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import closing

import numpy as np
import pytest

from lineproof.drivers import open_analyzer
from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.values import SweepPlan

RESOURCE = os.environ.get("LINEPROOF_HARDWARE_RESOURCE")
pytestmark = [pytest.mark.hardware,
              pytest.mark.skipif(not RESOURCE, reason="set LINEPROOF_HARDWARE_RESOURCE to test real hardware")]


@pytest.fixture
def analyzer() -> Iterator[ProfiledAnalyzer]:
    profile = os.environ.get("LINEPROOF_HARDWARE_PROFILE", "generic-scpi-analyzer")
    transport = os.environ.get("LINEPROOF_HARDWARE_TRANSPORT", "visa")
    with closing(open_analyzer(RESOURCE, profile, transport)) as opened:  # type: ignore[arg-type]
        yield opened


def test_identify_sweep_and_read_back(analyzer: ProfiledAnalyzer) -> None:
    identity = analyzer.identify()
    assert identity.manufacturer and identity.resource == RESOURCE
    caps = analyzer.capabilities
    low = caps.frequency_min_hz
    high = min(caps.frequency_max_hz, low + 0.5 * (caps.frequency_max_hz - low))
    plan = SweepPlan(low, high, min(101, caps.max_points))
    analyzer.configure(plan)
    sweep = analyzer.measure([caps.parameters[0]])
    trace = sweep[caps.parameters[0]]
    np.testing.assert_array_equal(sweep.frequencies_hz, plan.frequencies())
    # A raw reflection of a passive port is bounded; anything else is garbage from the link.
    assert trace.shape == (plan.points,) and np.all(np.isfinite(trace)) and np.all(np.abs(trace) < 10)
