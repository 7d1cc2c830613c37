"""Opening a station: its analyzer (and switch) through the drivers, a simulated bench when
the station is one, and the operator that connects things -- the run's "connect and identify".
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from lineproof.errors import InputError, LineproofError
from lineproof.interfaces import Analyzer, Operator, Switch
from lineproof.operators import ConsoleOperator, SimulatedOperator, SwitchOperator
from lineproof.sequence import SequenceSpec, profile_argument
from lineproof.station_file import StationSpec
from lineproof.values import InstrumentIdentity


@dataclass
class OpenStation:
    """A station ready to measure; :meth:`close` releases everything it opened."""

    spec: StationSpec
    analyzer: Analyzer
    operator: Operator
    identity: InstrumentIdentity
    profile_name: str
    bench: Any = None  # a SimulatedBench when the station is simulated
    switch: Switch | None = None
    _closers: list[Callable[[], None]] = field(default_factory=list)

    def close(self) -> None:
        for closer in reversed(self._closers):
            try:
                closer()
            except (OSError, LineproofError):
                pass  # closing is best effort; the run's outcome is already decided
        self._closers.clear()

    def __enter__(self) -> OpenStation:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _profile_argument(spec: StationSpec, written: str) -> str:
    return profile_argument(spec.source, written)


def _start_bench(spec: StationSpec) -> Any:
    from lineproof.simulators.bench import SimulatedBench

    local = Path(spec.source).parent / str(spec.simulated_bench)
    return SimulatedBench(local if local.is_file() else str(spec.simulated_bench)).start()


def _analyzer_resource(spec: StationSpec, bench: Any) -> str:
    if spec.analyzer.resource is not None:
        return spec.analyzer.resource
    if spec.analyzer.transport == "visa":
        return bench.visa_resource
    port = getattr(bench, "serial_port", None)
    if port is None:
        raise InputError("this simulated bench serves no serial analyzer", key="station.analyzer.transport",
                         fix="use transport = \"visa\" or a scenario with a serial analyzer")
    return str(port)


def _open_analyzer(spec: StationSpec, resource: str) -> Analyzer:
    from lineproof.drivers import open_analyzer
    from lineproof.drivers.connect import serial_options_of
    from lineproof.drivers.profiles import load_analyzer_profile

    analyzer = spec.analyzer
    profile = load_analyzer_profile(_profile_argument(spec, analyzer.profile))
    if analyzer.transport == "serial":
        options = serial_options_of(profile)
        if analyzer.baud_rate:
            options = dataclasses.replace(options, baud_rate=analyzer.baud_rate)
        return open_analyzer(resource, profile, "serial", serial=options)
    return open_analyzer(resource, profile, "visa")


def _open_switch(spec: StationSpec, bench: Any) -> Switch:
    from lineproof.drivers import open_switch

    assert spec.switch is not None
    resource = spec.switch.resource or getattr(bench, "switch_resource", None)
    if resource is None:
        raise InputError("this simulated bench has no switch matrix", key="station.switch",
                         fix="use a scenario with a switch, or connect by operator")
    return open_switch(resource, _profile_argument(spec, spec.switch.profile))


def _make_operator(sequence: SequenceSpec, station: OpenStation, ask: Callable[[str], str | None]) -> Operator:
    spec = station.spec
    if spec.connected_by == "switch":
        assert station.switch is not None and spec.switch is not None
        slots = {u.serial: u.slot for u in sequence.devices.units if u.slot} if sequence.devices else {}
        return SwitchOperator(station.switch, spec.switch.wiring, slots, spec.switch.routes, spec.analyzer.port)
    control = station.bench.control_address if station.bench is not None else spec.bench_control
    hands = SimulatedOperator(control) if control is not None else None
    if spec.connected_by == "simulated-operator":
        assert hands is not None
        return hands
    return ConsoleOperator(ask, hands)


def open_station(sequence: SequenceSpec, ask: Callable[[str], str | None]) -> OpenStation:
    """Start the simulated bench if there is one, open the instruments, identify the analyzer."""
    spec = sequence.station
    closers: list[Callable[[], None]] = []
    try:
        bench = None
        if spec.simulated_bench is not None:
            bench = _start_bench(spec)
            closers.append(bench.stop)
        analyzer = _open_analyzer(spec, _analyzer_resource(spec, bench))
        closers.append(analyzer.close)
        identity = analyzer.identify()
        switch = None
        if spec.switch is not None and spec.connected_by == "switch":
            switch = _open_switch(spec, bench)
            closers.append(switch.close)
        profile_name = getattr(getattr(analyzer, "profile", None), "name", spec.analyzer.profile)
        station = OpenStation(spec, analyzer, None, identity, profile_name, bench, switch, closers)  # type: ignore[arg-type]
        station.operator = _make_operator(sequence, station, ask)
        operator_close = getattr(station.operator, "close", None)
        if operator_close is not None and spec.connected_by != "switch":
            closers.append(operator_close)
        return station
    except BaseException:
        for closer in reversed(closers):
            try:
                closer()
            except (OSError, LineproofError):
                pass
        raise
