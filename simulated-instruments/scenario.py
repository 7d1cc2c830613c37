"""Scenario files: a TOML description of a simulated bench -- its analyzers and how each is
served, the actual calibration standards, terminations and check standards, a population of
devices, and faults armed at start.

The layout (every key optional unless said; see the shipped scenarios for worked examples):

- ``[bench]`` ``name``, ``seed``, ``time_scale`` (0: sweeps finish at once, 1: real time),
  ``temperature_c``, ``temperature_profile`` (``[[seconds, °C], ...]``), ``clock_rate``
  (bench seconds per real second) and ``seconds_per_sweep`` (bench seconds each sweep moves
  the clock on; see :mod:`.drift`);
- ``[analyzer]`` -- or ``[[analyzer]]`` tables for several, named ``analyzer``,
  ``analyzer2``, ... -- with the fields of :class:`AnalyzerSimulationSettings` (``model``:
  ``reflection`` | ``forward`` | ``full``; ``session_seed``: another session at the same
  bench, other connector draws and noise), ``transport`` (``scpi`` over TCP, or ``serial``
  on a pseudo-terminal) and ``baud_rate`` (serial), ``[[analyzer.port]]`` tables of
  :class:`PortErrorSettings` and an ``[analyzer.drift]`` table of :class:`DriftSettings`;
- ``[standards]`` ``kit`` (required), ``deviation``, ``seed``;
- ``[objects.<name>]`` and ``[[populations]]`` (see :mod:`.scenario_objects`);
- ``[switch]`` with the fields of :class:`SwitchSettings` and ``[[switch.channel]]`` tables
  (``channel = "1!3"``, ``analyzer``, ``port``, ``object``, ``output``, ``reversed``);
- ``[[faults]]`` (see :mod:`.faults`; ``instrument = "switch"`` for the switch).

The simulator reads the kit file itself, with its own code, and perturbs the standards so
that they differ from the kit's nominal definitions the way real standards do.

Every key is checked when the file is read (:mod:`.scenario_checks`): its type (a settings
key's from its dataclass field), its range, and no unknown key or table anywhere; each problem
is an :class:`InputError` with the file, the key, its line and the fix.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from lineproof.errors import InputError
from lineproof.simulators import objects as obj
from lineproof.simulators.analyzer_sim import AnalyzerSimulationSettings
from lineproof.simulators.drift import BenchEnvironment, DriftSettings, TemperatureProfile
from lineproof.simulators.error_model import MODEL_DIRECTIONS, PortErrorSettings
from lineproof.simulators.scenario_checks import (
    ANALYZER_RANGES,
    PORT_RANGES,
    SEED,
    SWITCH_RANGES,
    TIME_SCALE,
    Range,
    check_identity,
    finite,
    optional,
    refuse_unknown,
    require,
    typed_fields,
    with_line,
)
from lineproof.simulators.scenario_objects import actual_standards, object_from_table, population, resolve
from lineproof.simulators.scpi import ScpiCommandError
from lineproof.simulators.switch_sim import (
    SwitchChannelWiring,
    SwitchSettings,
    format_channel,
    parse_channel_list,
)

TRANSPORTS = ("scpi", "serial")
#: Serial rates a pseudo-terminal is paced at; anything else is refused as a likely typo.
BAUD_RATES = (1200, 2400, 4800, 9600, 19200, 38400, 57600, 115200, 230400, 460800, 921600)


@dataclass(frozen=True)
class AnalyzerSpec:
    """One analyzer of a bench: its model settings and how it is served."""

    name: str
    settings: AnalyzerSimulationSettings
    transport: str = "scpi"
    baud_rate: int = 115200


@dataclass(frozen=True)
class EnvironmentSettings:
    """The bench clock and temperature a scenario asks for (see drift.py)."""

    temperature_c: float = 23.0
    temperature_profile: tuple[tuple[float, float], ...] | None = None
    clock_rate: float = 1.0
    seconds_per_sweep: float = 0.0

    def build(self) -> BenchEnvironment:
        profile = TemperatureProfile(self.temperature_profile) if self.temperature_profile else None
        return BenchEnvironment(self.temperature_c, profile, self.clock_rate, self.seconds_per_sweep)


@dataclass
class Scenario:
    """A bench ready to build: settings and every object that may be connected."""

    name: str
    source: str
    seed: int
    analyzers: list[AnalyzerSpec]
    objects: dict[str, obj.BenchObject] = field(default_factory=dict)
    devices: list[tuple[str, str]] = field(default_factory=list)  # (serial, model) in order
    #: Faults armed when the bench starts ([[faults]] tables; see faults.py).
    faults: list[dict[str, Any]] = field(default_factory=list)
    #: The switch matrix and what its channels are wired to, if the bench has one.
    switch: SwitchSettings | None = None
    switch_wiring: list[SwitchChannelWiring] = field(default_factory=list)
    environment: EnvironmentSettings = EnvironmentSettings()

    @property
    def analyzer(self) -> AnalyzerSimulationSettings:
        """The first analyzer's settings (most benches have one)."""
        return self.analyzers[0].settings


def _port_settings(table: Any, source: str, where: str) -> PortErrorSettings:
    if not isinstance(table, dict):
        raise InputError("a port is a table", path=source, key=where, fix="write [[analyzer.port]] tables")
    allowed = set(PortErrorSettings.__dataclass_fields__)
    refuse_unknown(table, allowed, source, where)
    return PortErrorSettings(**typed_fields(table, PortErrorSettings, PORT_RANGES, source, where))


_SERVING_KEYS = {"port", "transport", "baud_rate", "drift"}


def _analyzer_spec(table: Any, name: str, where: str, bench: dict[str, Any], source: str) -> AnalyzerSpec:
    if not isinstance(table, dict):
        raise InputError("an analyzer is a table", path=source, key=where, fix="write [analyzer] with its keys")
    allowed = set(AnalyzerSimulationSettings.__dataclass_fields__) - {"port_settings"}
    refuse_unknown(table, allowed | _SERVING_KEYS, source, where)
    values = typed_fields(table, AnalyzerSimulationSettings, ANALYZER_RANGES, source, where)
    check_identity(values, source, where)
    ports = [_port_settings(p, source, f"{where}.port[{i}]")
             for i, p in enumerate(optional(table, "port", [{}], list, source, where))]
    values["drift"] = _drift(optional(table, "drift", {}, dict, source, where), source, f"{where}.drift")
    model = values.get("model", "reflection" if values.get("ports", 1) == 1 else "full")
    if model not in MODEL_DIRECTIONS:
        raise InputError(f"unknown analyzer model {model!r}", path=source, key=f"{where}.model",
                         fix=f"use one of {', '.join(MODEL_DIRECTIONS)}")
    needed_ports = 1 if model == "reflection" else 2
    if values.get("ports", needed_ports) != needed_ports:
        raise InputError(f"a {model!r} analyzer has {needed_ports} port(s), not {values['ports']}",
                         path=source, key=f"{where}.ports", fix=f"set ports = {needed_ports} or leave it out")
    _check_frequency_range(values, source, where)
    values.update(model=model, ports=needed_ports)
    values.setdefault("time_scale", bench["time_scale"])
    values.setdefault("seed", bench["seed"] + 1000 * (0 if name == "analyzer" else int(name[8:])))
    transport = optional(table, "transport", "scpi", str, source, where)
    if transport not in TRANSPORTS:
        raise InputError(f"unknown transport {transport!r}", path=source, key=f"{where}.transport",
                         fix=f"use one of {', '.join(TRANSPORTS)}")
    baud_rate = optional(table, "baud_rate", 115200, int, source, where)
    if baud_rate not in BAUD_RATES:
        raise InputError(f"unusual baud rate {baud_rate}", path=source, key=f"{where}.baud_rate",
                         fix=f"use one of {', '.join(map(str, BAUD_RATES))}")
    if values.get("internal_correction") and model == "forward":
        raise InputError("a one-path analyzer cannot correct its own data", path=source,
                         key=f"{where}.internal_correction", fix='use model = "full" or leave it out')
    return AnalyzerSpec(name, AnalyzerSimulationSettings(port_settings=tuple(ports), **values), transport, baud_rate)


def _check_frequency_range(values: dict[str, Any], source: str, where: str) -> None:
    defaults = AnalyzerSimulationSettings()
    low = values.get("frequency_min_hz", defaults.frequency_min_hz)
    high = values.get("frequency_max_hz", defaults.frequency_max_hz)
    if low >= high:
        key = "frequency_max_hz" if "frequency_max_hz" in values else "frequency_min_hz"
        raise InputError(f"the frequency range {low:g}..{high:g} Hz is empty", path=source, key=f"{where}.{key}",
                         fix="frequency_min_hz must be below frequency_max_hz (defaults 1e6 and 3e9)")


def _drift(table: dict[str, Any], source: str, where: str) -> DriftSettings:
    allowed = set(DriftSettings.__dataclass_fields__)
    refuse_unknown(table, allowed, source, where)
    return DriftSettings(**typed_fields(table, DriftSettings, {}, source, where))


#: The keys of [bench] (see the module docstring).
_BENCH_KEYS = {"name", "seed", "time_scale", "temperature_c", "temperature_profile", "clock_rate",
               "seconds_per_sweep"}
#: The top-level tables of a scenario file.
_TOP_LEVEL_KEYS = {"bench", "analyzer", "standards", "objects", "populations", "switch", "faults"}
_STANDARDS_KEYS = {"kit", "deviation", "seed"}


def _bench(data: dict[str, Any], source: str, path: Path) -> dict[str, Any]:
    """[bench] with its keys checked; name, seed and time_scale filled in."""
    bench = optional(data, "bench", {}, dict, source, "")
    refuse_unknown(bench, _BENCH_KEYS, source, "bench")
    seed = optional(bench, "seed", 1, int, source, "bench")
    SEED.check(seed, source, "bench.seed")
    time_scale = finite(optional(bench, "time_scale", 0.0, float, source, "bench"), source, "bench.time_scale")
    TIME_SCALE.check(time_scale, source, "bench.time_scale")
    return {**bench, "name": optional(bench, "name", path.stem, str, source, "bench"), "seed": seed,
            "time_scale": time_scale}


def _environment(bench: dict[str, Any], source: str) -> EnvironmentSettings:
    profile = optional(bench, "temperature_profile", None, list, source, "bench")
    points = None
    if profile is not None:
        try:
            points = tuple((float(t), float(c)) for t, c in profile)
            if not all(math.isfinite(t) and -40.0 <= c <= 85.0 for t, c in points):
                raise ValueError("times must be finite and temperatures from -40 to 85 °C")
            TemperatureProfile(points)
        except (TypeError, ValueError) as exc:
            raise InputError(f"bad temperature profile ({exc})", path=source, key="bench.temperature_profile",
                             fix="write [[seconds, celsius], ...] with increasing seconds, e.g. [[0, 23], [3600, 26]]"
                             ) from exc
    clock_rate = finite(optional(bench, "clock_rate", 1.0, float, source, "bench"), source, "bench.clock_rate")
    if clock_rate < 0:
        raise InputError("the bench clock cannot run backwards", path=source, key="bench.clock_rate",
                         fix="use 0 (moves only when advanced), 1 (real time) or more")
    per_sweep = finite(optional(bench, "seconds_per_sweep", 0.0, float, source, "bench"), source,
                       "bench.seconds_per_sweep")
    if per_sweep < 0:
        raise InputError("a sweep cannot move the bench clock backwards", path=source, key="bench.seconds_per_sweep",
                         fix="use 0 (sweeps take no bench time) or a positive number of seconds")
    temperature_c = optional(bench, "temperature_c", 23.0, float, source, "bench")
    Range(-40.0, 85.0, fix="a bench temperature in °C from -40 to 85").check(temperature_c, source,
                                                                           "bench.temperature_c")
    return EnvironmentSettings(temperature_c, points, clock_rate, per_sweep)


def _analyzers(data: dict[str, Any], bench: dict[str, Any], source: str) -> list[AnalyzerSpec]:
    tables = data.get("analyzer", {})
    several = isinstance(tables, list)
    tables = tables if several else [tables]
    if not tables:
        raise InputError("a bench needs an analyzer", path=source, key="analyzer", fix="add an [analyzer] table")
    names = ["analyzer"] + [f"analyzer{i}" for i in range(2, len(tables) + 1)]
    return [_analyzer_spec(table, name, f"analyzer[{index}]" if several else "analyzer", bench, source)
            for index, (name, table) in enumerate(zip(names, tables, strict=True))]


def _faults(tables: Any, source: str) -> list[dict[str, Any]]:
    if not isinstance(tables, list) or not all(isinstance(t, dict) for t in tables):
        raise InputError("faults must be an array of tables", path=source, key="faults",
                         fix='write [[faults]] tables, e.g. kind = "drop"')
    for index, table in enumerate(tables):
        optional(table, "instrument", "analyzer", str, source, f"faults[{index}]")  # the rest: faults.py, at start
    return [dict(t) for t in tables]


def _switch(table: Any, scenario: Scenario, bench: dict[str, Any]) -> None:
    source = scenario.source
    if not isinstance(table, dict):
        raise InputError("the switch is a table", path=source, key="switch", fix="write [switch] with its keys")
    allowed = set(SwitchSettings.__dataclass_fields__)
    refuse_unknown(table, allowed | {"channel"}, source, "switch")
    values = typed_fields(table, SwitchSettings, SWITCH_RANGES, source, "switch")
    check_identity(values, source, "switch")
    values.setdefault("time_scale", bench["time_scale"])
    values.setdefault("seed", scenario.seed + 31)
    scenario.switch = SwitchSettings(**values)
    seen: set[tuple[int, int]] = set()
    for index, wiring in enumerate(optional(table, "channel", [], list, source, "switch")):
        made = _channel_wiring(wiring, scenario, f"switch.channel[{index}]")
        if made.channel in seen:
            raise InputError(f"channel {format_channel(made.channel)} is wired twice", path=source,
                             key=f"switch.channel[{index}].channel", fix="wire each channel once")
        seen.add(made.channel)
        scenario.switch_wiring.append(made)


_CHANNEL_KEYS = {"channel", "analyzer", "port", "object", "output", "reversed"}


def _channel_wiring(table: Any, scenario: Scenario, where: str) -> SwitchChannelWiring:
    source = scenario.source
    if not isinstance(table, dict) or set(table) - _CHANNEL_KEYS:
        raise InputError("a channel is a table of: " + ", ".join(sorted(_CHANNEL_KEYS)), path=source, key=where,
                         fix='e.g. { channel = "1!3", port = 1, object = "open" }')
    text = require(table, "channel", str, source, where)
    try:
        channels = parse_channel_list(f"(@{text})")
    except ScpiCommandError:
        channels = []
    settings = scenario.switch
    if len(channels) != 1 or not (1 <= channels[0][0] <= settings.modules
                                  and 1 <= channels[0][1] <= settings.channels_per_module):
        raise InputError(f"not a channel of this switch: {text!r}", path=source, key=f"{where}.channel",
                         fix=f'write "<module>!<channel>" within {settings.modules} modules of '
                             f"{settings.channels_per_module} channels, e.g. \"1!3\"")
    analyzers = {spec.name: spec.settings for spec in scenario.analyzers}
    analyzer = optional(table, "analyzer", "analyzer", str, source, where)
    if analyzer not in analyzers:
        raise InputError(f"no analyzer named {analyzer!r}", path=source, key=f"{where}.analyzer",
                         fix=f"use one of {', '.join(analyzers)}")
    ports = analyzers[analyzer].ports
    port = optional(table, "port", 1, int, source, where)
    thing = require(table, "object", str, source, where)
    output = optional(table, "output", None, str, source, where)
    output_port = None
    if output is not None and output.lower().startswith("port:"):
        output_port, output = int(output[5:]) if output[5:].isdigit() else -1, None
    for name, key in ((thing, "object"), (output, "output")):
        if name is not None and name not in scenario.objects:
            raise InputError(f"no object named {name!r}", path=source, key=f"{where}.{key}",
                             fix="name an object of [objects], a standard of the kit or a device serial")
    problem = _wiring_problem(scenario.objects[thing], output and scenario.objects[output], port, output_port, ports)
    if problem:
        raise InputError(problem, path=source, key=where, fix="see PROTOCOLS.md §4")
    return SwitchChannelWiring(channels[0], analyzer, port, thing, output, output_port,
                               optional(table, "reversed", False, bool, source, where))


def _wiring_problem(thing: obj.BenchObject, output: obj.BenchObject | None, port: int, output_port: int | None,
                    ports: int) -> str | None:
    if not 1 <= port <= ports:
        return f"port {port} does not exist on a {ports}-port analyzer"
    if thing.ports == 1 and (output is not None or output_port is not None):
        return f"{thing.name} is a one-port: it has no output"
    if thing.ports == 2 and (output is None) == (output_port is None):
        return f"{thing.name} is a two-port: wire its output to a one-port or to port:<n>"
    if output is not None and output.ports != 1:
        return f"{output.name} cannot terminate an output: it is not a one-port"
    if output_port is not None and (not 1 <= output_port <= ports or output_port == port):
        return f"output port:{output_port} is not another port of this analyzer"
    return None


def find_scenario(path_or_name: str | Path) -> Path:
    """A scenario file by path, or a shipped one by name (``demo-bench``)."""
    path = Path(path_or_name)
    if path.exists():
        return path
    shipped = resources.files("lineproof.simulators") / "scenarios" / f"{path_or_name}.toml"
    if not shipped.is_file():
        raise InputError(f"no scenario file or shipped scenario named {path_or_name!r}", path=str(path_or_name),
                         fix=f"give a .toml path or one of: {', '.join(shipped_scenarios())}")
    return Path(str(shipped))


def shipped_scenarios() -> list[str]:
    folder = resources.files("lineproof.simulators") / "scenarios"
    return sorted(item.name[:-5] for item in folder.iterdir() if item.name.endswith(".toml"))


def load_scenario(path_or_name: str | Path) -> Scenario:
    """Load a scenario file by path, or a shipped one by name (``demo-bench``)."""
    path = find_scenario(path_or_name)
    source = str(path)
    try:
        text = path.read_text(encoding="utf-8")
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc})", path=source, fix="correct the TOML syntax") from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the scenario ({exc})", path=source,
                         fix="give a readable UTF-8 scenario file") from exc
    return with_line(lambda: _scenario(data, path, source), text, source)


def _scenario(data: dict[str, Any], path: Path, source: str) -> Scenario:
    refuse_unknown(data, _TOP_LEVEL_KEYS, source, "", "unknown table")
    bench = _bench(data, source, path)
    seed = bench["seed"]
    scenario = Scenario(name=bench["name"], source=source, seed=seed,
                        analyzers=_analyzers(data, bench, source), environment=_environment(bench, source))
    standards = optional(data, "standards", None, dict, source, "")
    if standards:
        refuse_unknown(standards, _STANDARDS_KEYS, source, "standards")
        kit_path = resolve(require(standards, "kit", str, source, "standards"), path)
        deviation = finite(optional(standards, "deviation", 1.0, float, source, "standards"), source,
                           "standards.deviation")
        Range(0.0, fix="0 (exactly as the kit says), 1 (as real standards differ) or another factor").check(
            deviation, source, "standards.deviation")
        kit_seed = optional(standards, "seed", seed + 7, int, source, "standards")
        SEED.check(kit_seed, source, "standards.seed")
        scenario.objects.update(actual_standards(kit_path, deviation, kit_seed))
    for name, table in optional(data, "objects", {}, dict, source, "").items():
        scenario.objects[name] = object_from_table(name, table, path, source)
    scenario.faults = _faults(data.get("faults", []), source)
    rng = np.random.default_rng(seed + 13)
    for index, table in enumerate(optional(data, "populations", [], list, source, "")):
        for serial, model, device in population(table, rng, source, index):
            scenario.objects[serial] = device
            scenario.devices.append((serial, model))
    if "switch" in data:
        _switch(data["switch"], scenario, bench)
    return scenario
