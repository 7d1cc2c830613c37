"""A simulated bench: a scenario's analyzer served over SCPI/TCP plus its control channel."""

from __future__ import annotations

from pathlib import Path

from lineproof.errors import InputError
from lineproof.simulators.analyzer_sim import SimulatedAnalyzer
from lineproof.simulators.control import BenchController, ControlServer
from lineproof.simulators.faults import FaultPlan, FaultSpecError
from lineproof.simulators.scenario import Scenario, load_scenario
from lineproof.simulators.scpi_analyzer import AnalyzerScpiFront, ScpiTcpServer


class SimulatedBench:
    """Start with :meth:`start` (or ``with``); every server listens on 127.0.0.1 only."""

    def __init__(self, scenario: Scenario | str | Path, scpi_port: int = 0, control_port: int = 0) -> None:
        self.scenario = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
        self.analyzer = SimulatedAnalyzer(self.scenario.analyzer)
        self.faults = {"analyzer": FaultPlan("analyzer")}
        self._arm_scenario_faults()
        self.scpi_server = ScpiTcpServer(AnalyzerScpiFront(self.analyzer, self.faults["analyzer"]), scpi_port)
        self.control_server = ControlServer(BenchController(self.scenario, self.analyzer, self.faults), control_port)
        self._started = False

    def _arm_scenario_faults(self) -> None:
        for index, spec in enumerate(self.scenario.faults):
            where = f"faults[{index}]"
            name = spec.get("instrument", "analyzer")
            if name not in self.faults:
                raise InputError(f"no instrument named {name!r} on this bench", path=self.scenario.source,
                                 key=f"{where}.instrument", fix=f"use one of {', '.join(self.faults)}")
            try:
                self.faults[name].arm(spec, where)
            except FaultSpecError as exc:
                raise InputError(str(exc), path=self.scenario.source, key=where) from exc

    @property
    def visa_resource(self) -> str:
        return self.scpi_server.visa_resource

    @property
    def control_address(self) -> str:
        return self.control_server.address

    def start(self) -> SimulatedBench:
        self.scpi_server.start()
        self.control_server.start()
        self._started = True
        return self

    def stop(self) -> None:
        if self._started:
            self.scpi_server.stop()
            self.control_server.stop()
            self._started = False

    def __enter__(self) -> SimulatedBench:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()
