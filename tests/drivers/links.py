"""What the driver behaviour suite runs on: a simulated bench, one transport, the profile
that transport speaks, and profile variants written as real TOML files."""

from __future__ import annotations

import dataclasses
from pathlib import Path
from typing import Any

from lineproof.drivers import open_analyzer
from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.drivers.transports import SerialOptions, VisaOptions
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient
from lineproof.simulators.scenario import load_scenario

IDEAL = Path(__file__).parent.parent / "scenarios" / "ideal-bench.toml"

#: Baud rate of the serial link in the behaviour suite: fast enough to keep the suite quick,
#: and paced by the simulator exactly as a UART at that rate would be.
SUITE_BAUD = 921600


@dataclasses.dataclass(frozen=True)
class LinkKind:
    """One way the suite reaches the simulated analyzer."""

    transport: str  # what open_analyzer is given: "visa" | "serial"
    profile: str  # the shipped profile that speaks the simulator's protocol there
    options: dict[str, Any]  # open_analyzer's visa= / serial= options
    serving: dict[str, Any]  # how the simulator serves the analyzer (AnalyzerSpec fields)
    #: Largest difference allowed between a trace and the truth's error model: binary
    #: REAL,64 carries the model's doubles, ASCII rows 9 significant digits (PROTOCOLS.md §2).
    data_tolerance: float
    #: An error code the instrument's protocol has (SCPI -222 Data out of range; §2 code 21).
    error_code: int


#: "scpi-tcp" moves the bytes of pyvisa-py's SOCKET session directly on its socket (the
#: default); "scpi-tcp-pyvisa-io" keeps every byte going through pyvisa-py's own reads and
#: writes, the path every other VISA resource takes; "serial-pty" is our line protocol
#: through pyserial on a pseudo-terminal.
LINKS: dict[str, LinkKind] = {
    "scpi-tcp": LinkKind("visa", "generic-scpi-reflectometer", {"visa": VisaOptions()},
                         {"transport": "scpi"}, 1e-12, -222),
    "scpi-tcp-pyvisa-io": LinkKind("visa", "generic-scpi-reflectometer",
                                   {"visa": VisaOptions(direct_socket_io=False)}, {"transport": "scpi"}, 1e-12, -222),
    "serial-pty": LinkKind("serial", "tarnmoor-serial-analyzer", {"serial": SerialOptions(baud_rate=SUITE_BAUD)},
                           {"transport": "serial", "baud_rate": SUITE_BAUD}, 1e-8, 21),
}


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(v)}" for k, v in value.items()) + " }"
    return repr(value)


def write_variant(folder: Path, base: str, tables: dict[str, dict[str, Any]], kind: str = "analyzer") -> Path:
    """A profile file based on the shipped ``base`` with ``tables`` overriding its keys."""
    lines = ["[profile]", f'name = "{base}-variant"', f'kind = "{kind}"', f'based_on = "{base}"']
    for table, values in tables.items():
        lines.append(f"[{table}]")
        lines += [f"{key} = {_toml_value(value)}" for key, value in values.items()]
    path = folder / f"{base}-variant-{len(list(folder.glob('*.toml')))}.toml"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@dataclasses.dataclass
class DriverBench:
    """One simulated bench, one transport, and every analyzer a test opened on it."""

    name: str
    bench: SimulatedBench
    control: BenchControlClient
    folder: Path
    opened: list[ProfiledAnalyzer] = dataclasses.field(default_factory=list)

    @property
    def kind(self) -> LinkKind:
        return LINKS[self.name]

    @property
    def profile(self) -> str:
        return self.kind.profile

    @property
    def resource(self) -> str:
        return self.bench.serial_port if self.kind.transport == "serial" else self.bench.visa_resource

    def analyzer(self, **tables: dict[str, Any]) -> ProfiledAnalyzer:
        """Open the bench's analyzer with the link's profile, or a variant of it."""
        profile: str | Path = write_variant(self.folder, self.profile, tables) if tables else self.profile
        analyzer = open_analyzer(self.resource, profile, self.kind.transport, **self.kind.options)
        self.opened.append(analyzer)
        return analyzer


    def arm(self, kind: str, **fields: Any) -> None:
        """Arm a fault on the bench's analyzer (PROTOCOLS.md §3 ``fault``)."""
        self.control.request("fault", instrument="analyzer", kind=kind, **fields)

    def fired(self) -> list[str]:
        """The commands the armed faults fired on."""
        report = self.control.request("faults", instrument="analyzer")["faults"]["analyzer"]
        return [command for fault in report["armed"] + report["spent"] for command in fault["fired"]]

    def sweeps(self) -> int:
        return self.control.request("status")["sweeps"]


def start_bench(serving: dict[str, Any] | None = None, **analyzer_settings: Any) -> SimulatedBench:
    """The ideal bench, its analyzer served as ``serving`` says, with ``analyzer_settings``."""
    scenario = load_scenario(IDEAL)
    spec = scenario.analyzers[0]
    scenario.analyzers[0] = dataclasses.replace(
        spec, settings=dataclasses.replace(spec.settings, **analyzer_settings), **(serving or {}))
    return SimulatedBench(scenario).start()
