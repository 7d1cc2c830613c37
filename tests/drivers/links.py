"""What the driver behaviour suite runs on: a simulated bench, one transport, the profile
that transport speaks, and profile variants written as real TOML files."""

from __future__ import annotations

import dataclasses
from pathlib import Path
from typing import Any

from lineproof.drivers import open_analyzer
from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators.control import BenchControlClient
from lineproof.simulators.scenario import load_scenario

IDEAL = Path(__file__).parent.parent / "scenarios" / "ideal-bench.toml"

#: Transports the behaviour suite runs over, with the shipped profile each one speaks.
LINKS = {"scpi-tcp": ("visa", "generic-scpi-reflectometer")}


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


def write_variant(folder: Path, base: str, tables: dict[str, dict[str, Any]]) -> Path:
    """A profile file based on the shipped ``base`` with ``tables`` overriding its keys."""
    lines = ["[profile]", f'name = "{base}-variant"', 'kind = "analyzer"', f'based_on = "{base}"']
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
    def transport(self) -> str:
        return LINKS[self.name][0]

    @property
    def profile(self) -> str:
        return LINKS[self.name][1]

    @property
    def resource(self) -> str:
        return self.bench.visa_resource

    def analyzer(self, **tables: dict[str, Any]) -> ProfiledAnalyzer:
        """Open the bench's analyzer with the link's profile, or a variant of it."""
        profile: str | Path = write_variant(self.folder, self.profile, tables) if tables else self.profile
        analyzer = open_analyzer(self.resource, profile, self.transport)
        self.opened.append(analyzer)
        return analyzer


def start_bench(**analyzer_settings: Any) -> SimulatedBench:
    scenario = load_scenario(IDEAL)
    scenario.analyzer = dataclasses.replace(scenario.analyzer, **analyzer_settings)
    return SimulatedBench(scenario).start()
