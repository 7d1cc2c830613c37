"""Scenario files: a TOML description of a simulated bench -- its analyzer, the actual
calibration standards, terminations and check standards, and a population of devices.

The simulator reads the kit file itself, with its own code, and perturbs the standards so
that they differ from the kit's nominal definitions the way real standards do.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from lineproof.errors import InputError
from lineproof.simulators import objects as obj
from lineproof.simulators.analyzer_sim import AnalyzerSimulationSettings
from lineproof.simulators.error_model import MODEL_DIRECTIONS, PortErrorSettings


@dataclass
class Scenario:
    """A bench ready to build: settings and every object that may be connected."""

    name: str
    source: str
    seed: int
    analyzer: AnalyzerSimulationSettings
    objects: dict[str, obj.BenchObject] = field(default_factory=dict)
    devices: list[tuple[str, str]] = field(default_factory=list)  # (serial, model) in order
    #: Faults armed when the bench starts ([[faults]] tables; see faults.py).
    faults: list[dict[str, Any]] = field(default_factory=list)


def _require(table: dict[str, Any], key: str, kinds: type | tuple[type, ...], source: str, where: str) -> Any:
    if key not in table:
        raise InputError("missing key", path=source, key=f"{where}.{key}", fix=f"add {key} = ...")
    value = table[key]
    if isinstance(value, int) and not isinstance(value, bool) and float in (kinds if isinstance(kinds, tuple) else (kinds,)):
        value = float(value)
    if not isinstance(value, kinds):
        raise InputError(f"wrong type {type(value).__name__}", path=source, key=f"{where}.{key}")
    return value


def _resolve(path_text: str, scenario_path: Path | None) -> Path:
    """A path relative to the scenario's folder, else to the shipped sequences folder."""
    candidate = Path(path_text)
    if scenario_path is not None and not candidate.is_absolute():
        local = scenario_path.parent / candidate
        if local.exists():
            return local
    if candidate.exists():
        return candidate
    shipped = resources.files("lineproof.sequences") / path_text
    return Path(str(shipped))


def actual_standards(kit_path: Path, deviation: float, seed: int) -> dict[str, obj.BenchObject]:
    """The kit's standards as they actually are: nominal values moved by seeded errors of
    the size real standards show (a few % of fringing capacitance, ~0.5 ps of offset delay,
    a load of 40-45 dB return loss), scaled by ``deviation`` (0 = exactly nominal)."""
    try:
        kit = tomllib.loads(kit_path.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError) as exc:
        raise InputError(f"cannot read cal kit ({exc})", path=str(kit_path)) from exc
    z0 = float(kit.get("kit", {}).get("reference_impedance_ohm", 50.0))
    rng = np.random.default_rng(seed)
    made: dict[str, obj.BenchObject] = {}
    for name, definition in kit.get("standards", {}).items():
        kind = definition.get("kind")
        delay = float(definition.get("offset_delay_s", 0.0)) + deviation * rng.normal(0, 0.5e-12)
        loss = float(definition.get("offset_loss_ohm_per_s", 0.0))
        z_offset = float(definition.get("offset_impedance_ohm", z0))
        if kind == "open":
            c = np.array(definition.get("capacitance", [0.0] * 4), dtype=float)
            c = c * (1 + deviation * rng.normal(0, 0.03))

            def open_end(f: np.ndarray, c: np.ndarray = c) -> np.ndarray:
                cap = c[0] + c[1] * f + c[2] * f**2 + c[3] * f**3
                return 1 / (1j * 2 * np.pi * f * cap) if np.any(cap) else None

            made[name] = obj.offset_standard(name, open_end, z_offset, delay, loss, z0, "open")
        elif kind == "short":
            inductance = np.array(definition.get("inductance", [0.0] * 4), dtype=float)
            inductance = inductance + deviation * np.array([rng.normal(0, 2e-12), 0, 0, 0])

            def short_end(f: np.ndarray, l: np.ndarray = inductance) -> np.ndarray:
                return 1j * 2 * np.pi * f * (l[0] + l[1] * f + l[2] * f**2 + l[3] * f**3)

            made[name] = obj.offset_standard(name, short_end, z_offset, max(delay, 0.0), loss, z0, "short")
        elif kind == "thru":
            made[name] = obj.thru(name, max(delay, 0.0), loss, z_offset)
        elif kind == "load":
            return_loss_db = rng.uniform(40.0, 45.0)
            magnitude = deviation * 10 ** (-return_loss_db / 20)
            made[name] = obj.reflection_from_polar(name, magnitude, rng.uniform(0, 2 * np.pi), 40e-12, "load")
    return made


def _port_settings(table: dict[str, Any]) -> PortErrorSettings:
    allowed = set(PortErrorSettings.__dataclass_fields__)
    return PortErrorSettings(**{k: float(v) for k, v in table.items() if k in allowed})


def _analyzer_settings(table: dict[str, Any], bench: dict[str, Any], source: str) -> AnalyzerSimulationSettings:
    ports = [_port_settings(p) for p in table.get("port", [{}])]
    allowed = set(AnalyzerSimulationSettings.__dataclass_fields__) - {"port_settings"}
    unknown = set(table) - allowed - {"port", "transport"}
    if unknown:
        raise InputError("unknown key", path=source, key=f"analyzer.{sorted(unknown)[0]}",
                         fix=f"use only: {', '.join(sorted(allowed | {'port', 'transport'}))}")
    values = {k: v for k, v in table.items() if k in allowed}
    model = values.get("model", "reflection" if int(values.get("ports", 1)) == 1 else "full")
    if model not in MODEL_DIRECTIONS:
        raise InputError(f"unknown analyzer model {model!r}", path=source, key="analyzer.model",
                         fix=f"use one of {', '.join(MODEL_DIRECTIONS)}")
    needed_ports = 1 if model == "reflection" else 2
    if int(values.get("ports", needed_ports)) != needed_ports:
        raise InputError(f"a {model!r} analyzer has {needed_ports} port(s), not {values['ports']}",
                         path=source, key="analyzer.ports", fix=f"set ports = {needed_ports} or leave it out")
    values.update(model=model, ports=needed_ports)
    values.setdefault("time_scale", float(bench.get("time_scale", 0.0)))
    values.setdefault("seed", int(bench.get("seed", 1)))
    return AnalyzerSimulationSettings(port_settings=tuple(ports), **values)


def _termination(name: str, table: dict[str, Any], source: str) -> obj.BenchObject:
    return obj.termination(
        name,
        _require(table, "resistance_ohm", float, source, f"objects.{name}"),
        float(table.get("series_inductance_h", 0.0)),
        float(table.get("shunt_capacitance_f", 0.0)),
        kind=table.get("kind", "termination"),
        description=table.get("description", ""),
    )


def _object(name: str, table: dict[str, Any], path: Path, source: str) -> obj.BenchObject:
    """One entry of [objects]: a Touchstone file, a thru, a circuit, or a termination."""
    where = f"objects.{name}"
    kind = table.get("kind", "object")
    description = table.get("description", "")
    if table.get("touchstone"):
        return obj.touchstone_object(name, str(_resolve(table["touchstone"], path)), kind)
    if kind == "thru":
        return obj.thru(name, float(table.get("delay_s", 0.0)), float(table.get("loss_ohm_per_s", 0.0)),
                        float(table.get("impedance_ohm", 50.0)), description)
    if "circuit" in table:
        circuit = _require(table, "circuit", list, source, where)
        try:
            made = obj.two_port_from_elements(name, circuit, kind, description)
            made.response(np.array([1e8, 2e8]))
        except (KeyError, TypeError, ValueError) as exc:
            raise InputError(f"bad circuit ({exc})", path=source, key=f"{where}.circuit") from exc
        return made
    return _termination(name, table, source)


def _population(table: dict[str, Any], rng: np.random.Generator, source: str, index: int) -> list[tuple[str, str, obj.BenchObject]]:
    where = f"populations[{index}]"
    model = _require(table, "model", str, source, where)
    prefix = _require(table, "serial_prefix", str, source, where)
    count = _require(table, "count", int, source, where)
    spread = float(table.get("spread", 0.0))
    circuit = _require(table, "circuit", list, source, where)
    defects = table.get("defects", {})
    made = []
    for number in range(int(table.get("first_serial", 1)), int(table.get("first_serial", 1)) + count):
        serial = f"{prefix}{number:04d}"
        elements = []
        for element in circuit:
            varied = dict(element)
            for key, value in element.items():
                if isinstance(value, (int, float)) and not isinstance(value, bool) and key != "element":
                    varied[key] = value * (1 + spread * rng.normal())
            elements.append(varied)
        for change in defects.get(serial, []):
            position = int(change["index"])
            elements[position] = {**elements[position], **{k: v for k, v in change.items() if k != "index"}}
        try:
            device = obj.two_port_from_elements(serial, elements, "device", model)
            device.response(np.array([1e8, 2e8]))
        except (KeyError, ValueError) as exc:
            raise InputError(f"bad circuit ({exc})", path=source, key=f"{where}.circuit") from exc
        made.append((serial, model, device))
    return made


def _faults(tables: Any, source: str) -> list[dict[str, Any]]:
    if not isinstance(tables, list) or not all(isinstance(t, dict) for t in tables):
        raise InputError("faults must be an array of tables", path=source, key="faults",
                         fix='write [[faults]] tables, e.g. kind = "drop"')
    return [dict(t) for t in tables]


def load_scenario(path_or_name: str | Path) -> Scenario:
    """Load a scenario file by path, or a shipped one by name (``demo-bench``)."""
    path = Path(path_or_name)
    if not path.exists():
        shipped = resources.files("lineproof.simulators") / "scenarios" / f"{path_or_name}.toml"
        if not shipped.is_file():
            raise InputError(f"no scenario file or shipped scenario named {path_or_name!r}", path=str(path_or_name))
        path = Path(str(shipped))
    source = str(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc})", path=source) from exc
    bench = data.get("bench", {})
    seed = int(bench.get("seed", 1))
    scenario = Scenario(
        name=str(bench.get("name", path.stem)),
        source=source,
        seed=seed,
        analyzer=_analyzer_settings(data.get("analyzer", {}), bench, source),
    )
    standards = data.get("standards")
    if standards:
        kit_path = _resolve(_require(standards, "kit", str, source, "standards"), path)
        scenario.objects.update(actual_standards(kit_path, float(standards.get("deviation", 1.0)),
                                                 int(standards.get("seed", seed + 7))))
    for name, table in data.get("objects", {}).items():
        scenario.objects[name] = _object(name, table, path, source)
    scenario.faults = _faults(data.get("faults", []), source)
    rng = np.random.default_rng(seed + 13)
    for index, table in enumerate(data.get("populations", [])):
        for serial, model, device in _population(table, rng, source, index):
            scenario.objects[serial] = device
            scenario.devices.append((serial, model))
    return scenario
