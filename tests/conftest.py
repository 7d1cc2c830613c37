"""Shared fixtures: simulated benches on 127.0.0.1, reached through the real drivers."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

from lineproof.drivers import open_analyzer
from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.operators import SimulatedOperator
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient

SCENARIOS = Path(__file__).parent / "scenarios"


@pytest.fixture
def ideal_bench() -> Iterator[SimulatedBench]:
    """A bench whose standards are exactly as the kit says and whose connectors repeat
    perfectly; trace noise is switched off through the control channel."""
    with SimulatedBench(SCENARIOS / "ideal-bench.toml") as bench:
        with BenchControlClient(bench.control_address) as control:
            control.request("set", noise=False)
        yield bench


@pytest.fixture
def demo_bench() -> Iterator[SimulatedBench]:
    with SimulatedBench("demo-bench") as bench:
        yield bench


@pytest.fixture
def control(ideal_bench: SimulatedBench) -> Iterator[BenchControlClient]:
    with BenchControlClient(ideal_bench.control_address) as client:
        yield client


@pytest.fixture
def operator(ideal_bench: SimulatedBench) -> Iterator[SimulatedOperator]:
    simulated = SimulatedOperator(ideal_bench.control_address)
    yield simulated
    simulated.close()


@pytest.fixture
def reflectometer(ideal_bench: SimulatedBench) -> Iterator[ProfiledAnalyzer]:
    analyzer = open_analyzer(ideal_bench.visa_resource, "generic-scpi-reflectometer")
    yield analyzer
    analyzer.close()


@pytest.fixture
def start_bench() -> Iterator[Callable[..., SimulatedBench]]:
    """Start simulated benches by scenario: a file name in tests/scenarios/ (``"two-port-bench"``)
    or a shipped scenario's name.  Trace noise is off unless ``noise=True``.  Every bench
    started is stopped when the test ends."""
    started: list[SimulatedBench] = []

    def start(name: str, noise: bool = False, **options: Any) -> SimulatedBench:
        local = SCENARIOS / f"{name}.toml"
        bench = SimulatedBench(local if local.exists() else name, **options).start()
        started.append(bench)
        if not noise:
            with BenchControlClient(bench.control_address) as client:
                client.request("set", noise=False)
        return bench

    yield start
    for bench in started:
        bench.stop()


SEQUENCES = Path(__file__).parent / "sequences"


def write_sequence_variant(folder: Path, name: str = "batch.toml", replace: dict[str, str] | None = None,
                           time_scale: float | None = None, bench_replace: dict[str, str] | None = None) -> Path:
    """Write a copy of a test sequence into ``folder``, its bench path made absolute, with text
    replacements; a bench ``time_scale`` (or ``bench_replace``) makes a private copy of the scenario too."""
    text = (SEQUENCES / name).read_text(encoding="utf-8")
    scenario = SCENARIOS / "batch-bench.toml"
    if time_scale is not None or bench_replace:
        changes = {"time_scale = 0.1": f"time_scale = {time_scale or 0.1}", **(bench_replace or {})}
        scenario_text = scenario.read_text(encoding="utf-8")
        for old, new in changes.items():
            assert old in scenario_text, old
            scenario_text = scenario_text.replace(old, new)
        scenario = folder / "bench.toml"
        scenario.write_text(scenario_text, encoding="utf-8")
    text = text.replace('"../scenarios/batch-bench.toml"', f'"{scenario.as_posix()}"')
    for old, new in (replace or {}).items():
        assert old in text, old
        text = text.replace(old, new)
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture(scope="session")
def sequence_writer() -> Callable[..., Path]:
    """:func:`write_sequence_variant` itself, for fixtures wider than one test."""
    return write_sequence_variant


@pytest.fixture
def sequence_variant(tmp_path: Path) -> Callable[..., Path]:
    """:func:`write_sequence_variant` into the test's own tmp_path."""

    def make(name: str = "batch.toml", replace: dict[str, str] | None = None, time_scale: float | None = None,
             bench_replace: dict[str, str] | None = None) -> Path:
        return write_sequence_variant(tmp_path, name, replace, time_scale, bench_replace)

    return make
