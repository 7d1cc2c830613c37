"""Fixtures of the driver behaviour suite: the simulated bench reached through the real
drivers, parametrised over transports (see links.py)."""

from __future__ import annotations

import sys
from collections.abc import Iterator
from pathlib import Path

import pytest
from links import LINKS, DriverBench, start_bench

from lineproof.simulators.control import BenchControlClient


def pytest_configure(config: pytest.Config) -> None:
    config.addinivalue_line("markers", "analyzer_settings(**settings): simulated analyzer settings for `link`")


def _link(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[DriverBench]:
    marker = request.node.get_closest_marker("analyzer_settings")
    bench = start_bench(LINKS[request.param].serving, **(marker.kwargs if marker else {}))
    control = BenchControlClient(bench.control_address)
    control.request("set", noise=False)
    driver_bench = DriverBench(request.param, bench, control, tmp_path)
    try:
        yield driver_bench
    finally:
        for analyzer in driver_bench.opened:
            analyzer.close()
        control.close()
        bench.stop()


def _params(names: list[str]) -> list[object]:
    # The simulated serial analyzer lives on a POSIX pseudo-terminal.
    posix_only = pytest.mark.skipif(sys.platform == "win32", reason="no pseudo-terminals on Windows")
    return [pytest.param(n, marks=posix_only) if LINKS[n].transport == "serial" else n for n in names]


@pytest.fixture(params=_params(sorted(LINKS)))
def link(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[DriverBench]:
    """The ideal bench (noise off) reached over each transport in turn.  A test may ask for
    other simulated analyzer settings with ``@pytest.mark.analyzer_settings(max_points=50)``."""
    yield from _link(request, tmp_path)


@pytest.fixture(params=sorted(name for name, kind in LINKS.items() if kind.transport == "visa"))
def visa_link(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[DriverBench]:
    """The same, over the VISA links only."""
    yield from _link(request, tmp_path)
