"""A simulated bench: a scenario's analyzers, each served over SCPI/TCP or over a serial
line on a pseudo-terminal, its switch matrix over SCPI/TCP, and the bench control channel."""

from __future__ import annotations

from pathlib import Path

from lineproof.errors import InputError
from lineproof.simulators.analyzer_sim import SimulatedAnalyzer
from lineproof.simulators.control import BenchController, ControlServer
from lineproof.simulators.faults import FaultPlan, FaultSpecError
from lineproof.simulators.pty_server import PtySerialServer
from lineproof.simulators.scenario import Scenario, load_scenario
from lineproof.simulators.scpi_analyzer import AnalyzerScpiFront, ScpiTcpServer
from lineproof.simulators.serial_analyzer import SerialAnalyzerFront
from lineproof.simulators.switch_sim import SimulatedSwitch, SwitchScpiFront


class SimulatedBench:
    """Start with :meth:`start` (or ``with``); every server listens on 127.0.0.1 only.

    ``scpi_port`` fixes the TCP port of the first SCPI analyzer (0: any free port)."""

    def __init__(self, scenario: Scenario | str | Path, scpi_port: int = 0, control_port: int = 0) -> None:
        self.scenario = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
        self.environment = self.scenario.environment.build()
        self.analyzers = {spec.name: SimulatedAnalyzer(spec.settings, self.environment)
                          for spec in self.scenario.analyzers}
        self.faults = {name: FaultPlan(name) for name in self.analyzers}
        if self.scenario.switch is not None:
            self.faults["switch"] = FaultPlan("switch")
        self._arm_scenario_faults()  # before any server exists: a bad fault leaves nothing open
        self.scpi_servers: dict[str, ScpiTcpServer] = {}
        self.serial_servers: dict[str, PtySerialServer] = {}
        for spec in self.scenario.analyzers:
            model, faults = self.analyzers[spec.name], self.faults[spec.name]
            if spec.transport == "serial":
                self.serial_servers[spec.name] = PtySerialServer(SerialAnalyzerFront(model), spec.baud_rate, faults,
                                                                 name=f"{spec.name}-serial")
            else:
                port = scpi_port if not self.scpi_servers else 0
                self.scpi_servers[spec.name] = ScpiTcpServer(AnalyzerScpiFront(model, faults), port,
                                                             name=f"{spec.name}-scpi")
        self.switch: SimulatedSwitch | None = None
        self.switch_server: ScpiTcpServer | None = None
        if self.scenario.switch is not None:
            self.switch = SimulatedSwitch(self.scenario.switch, self.scenario.switch_wiring, self.analyzers,
                                          self.scenario.objects)
            self.switch_server = ScpiTcpServer(SwitchScpiFront(self.switch, self.faults["switch"]), name="switch-scpi")
        self.control_server = ControlServer(
            BenchController(self.scenario, self.analyzers, self.faults, self.switch, self.environment), control_port)
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
    def analyzer(self) -> SimulatedAnalyzer:
        """The first analyzer's model."""
        return next(iter(self.analyzers.values()))

    @property
    def visa_resources(self) -> dict[str, str]:
        """VISA resource string of every analyzer served over SCPI, by name."""
        return {name: server.visa_resource for name, server in self.scpi_servers.items()}

    @property
    def visa_resource(self) -> str:
        """The VISA resource of the first SCPI analyzer."""
        if not self.scpi_servers:
            raise LookupError(f"{self.scenario.name} has no SCPI analyzer (see serial_port)")
        return next(iter(self.scpi_servers.values())).visa_resource

    @property
    def serial_ports(self) -> dict[str, str]:
        """Device path of every analyzer served on a pseudo-terminal, by name."""
        return {name: server.device_path for name, server in self.serial_servers.items()}

    @property
    def serial_port(self) -> str:
        """The device path of the first serial analyzer (open it with pyserial)."""
        if not self.serial_servers:
            raise LookupError(f"{self.scenario.name} has no serial analyzer (see visa_resource)")
        return next(iter(self.serial_servers.values())).device_path

    @property
    def switch_resource(self) -> str:
        """The VISA resource of the switch matrix."""
        if self.switch_server is None:
            raise LookupError(f"{self.scenario.name} has no switch matrix")
        return self.switch_server.visa_resource

    @property
    def control_address(self) -> str:
        return self.control_server.address

    def _servers(self) -> list[ScpiTcpServer | PtySerialServer]:
        switch = [self.switch_server] if self.switch_server is not None else []
        return [*self.scpi_servers.values(), *self.serial_servers.values(), *switch]

    def start(self) -> SimulatedBench:
        for server in self._servers():
            server.start()
        self.control_server.start()
        self._started = True
        return self

    def stop(self) -> None:
        if self._started:
            for server in self._servers():
                server.stop()
            self.control_server.stop()
            self._started = False
        else:
            for server in self.serial_servers.values():
                server.stop()  # releases the pseudo-terminal made in __init__

    def __enter__(self) -> SimulatedBench:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()
