"""The objects of a scenario: the actual calibration standards (the kit file read by the
simulator's own code and perturbed as real standards are), the ``[objects]`` tables
(terminations, thrus, check standards, circuits, Touchstone files) and device populations
with unit-to-unit spread and defects.
"""

from __future__ import annotations

import tomllib
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from lineproof.errors import InputError
from lineproof.simulators import objects as obj

#: The keys an [objects.<name>] table may hold, by what it describes.
_OBJECT_KEYS = {
    "termination": {"resistance_ohm", "series_inductance_h", "shunt_capacitance_f"},
    "thru": {"delay_s", "loss_ohm_per_s", "impedance_ohm"},
    "circuit": {"circuit", "terminated_ohm"},
    "touchstone": {"touchstone"},
}
_COMMON_KEYS = {"kind", "description"}


def require(table: dict[str, Any], key: str, kinds: type | tuple[type, ...], source: str, where: str) -> Any:
    """``table[key]`` of the given type, or an InputError naming file, key and fix."""
    if key not in table:
        raise InputError("missing key", path=source, key=_key(where, key), fix=f"add {key} = ...")
    return _typed(table[key], kinds, source, _key(where, key))


def optional(table: dict[str, Any], key: str, default: Any, kinds: type | tuple[type, ...], source: str,
             where: str) -> Any:
    return _typed(table[key], kinds, source, _key(where, key)) if key in table else default


def refuse_unknown(table: dict[str, Any], allowed: set[str], source: str, where: str,
                   message: str = "unknown key") -> None:
    """An InputError naming the first key of ``table`` not in ``allowed`` (a typo is never ignored)."""
    unknown = set(table) - allowed
    if unknown:
        raise InputError(message, path=source, key=_key(where, sorted(unknown)[0]),
                         fix=f"use only: {', '.join(sorted(allowed))}")


def _key(where: str, key: str) -> str:
    return f"{where}.{key}" if where else key


def _typed(value: Any, kinds: type | tuple[type, ...], source: str, key: str) -> Any:
    kinds = kinds if isinstance(kinds, tuple) else (kinds,)
    if isinstance(value, int) and not isinstance(value, bool) and float in kinds:
        value = float(value)
    if isinstance(value, bool) and bool not in kinds or not isinstance(value, kinds):
        wanted = " or ".join({float: "a number", int: "an integer", str: "a string", list: "an array",
                              bool: "true or false", dict: "a table"}[k] for k in kinds)
        raise InputError(f"wrong type {type(value).__name__}", path=source, key=key, fix=f"write {wanted}")
    return value


def resolve(path_text: str, scenario_path: Path | None) -> Path:
    """A path relative to the scenario's folder, else to the working folder, else a shipped
    file: in the simulators' scenarios folder (Touchstone objects) or in the sequences
    folder (cal kits)."""
    candidate = Path(path_text)
    if scenario_path is not None and not candidate.is_absolute():
        local = scenario_path.parent / candidate
        if local.exists():
            return local
    if candidate.exists() or candidate.is_absolute():
        return candidate
    for package, folder in (("lineproof.simulators", "scenarios"), ("lineproof.sequences", "")):
        shipped = resources.files(package).joinpath(*(p for p in (folder, path_text) if p))
        if shipped.is_file():
            return Path(str(shipped))
    return candidate


# -- the calibration standards as they actually are ---------------------------------------------

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

            def open_end(f: np.ndarray, c: np.ndarray = c) -> np.ndarray | None:
                cap = c[0] + c[1] * f + c[2] * f**2 + c[3] * f**3
                return 1 / (1j * 2 * np.pi * f * cap) if np.any(cap) else None

            made[name] = obj.offset_standard(name, open_end, z_offset, delay, loss, z0, "open")
        elif kind == "short":
            inductance = np.array(definition.get("inductance", [0.0] * 4), dtype=float)
            inductance = inductance + deviation * np.array([rng.normal(0, 2e-12), 0, 0, 0])

            def short_end(f: np.ndarray, ind: np.ndarray = inductance) -> np.ndarray:
                return 1j * 2 * np.pi * f * (ind[0] + ind[1] * f + ind[2] * f**2 + ind[3] * f**3)

            made[name] = obj.offset_standard(name, short_end, z_offset, max(delay, 0.0), loss, z0, "short")
        elif kind == "thru":
            made[name] = obj.thru(name, max(delay, 0.0), loss, z_offset)
        elif kind == "load":
            return_loss_db = rng.uniform(40.0, 45.0)
            magnitude = deviation * 10 ** (-return_loss_db / 20)
            made[name] = obj.reflection_from_polar(name, magnitude, rng.uniform(0, 2 * np.pi), 40e-12, "load")
    return made


# -- [objects] ------------------------------------------------------------------------------

def object_from_table(name: str, table: Any, scenario_path: Path, source: str) -> obj.BenchObject:
    """One entry of [objects]: a termination, a thru, a circuit (a two-port, or a one-port
    when ``terminated_ohm`` ends it) or a Touchstone file."""
    where = f"objects.{name}"
    if not isinstance(table, dict):
        raise InputError("an object is a table", path=source, key=where, fix=f"write [objects.{name}] with its keys")
    kind = optional(table, "kind", "object", str, source, where)
    description = optional(table, "description", "", str, source, where)
    form = ("touchstone" if "touchstone" in table else "thru" if kind == "thru"
            else "circuit" if "circuit" in table else "termination")
    refuse_unknown(table, _COMMON_KEYS | _OBJECT_KEYS[form], source, where, f"unknown key for a {form} object")
    if form == "touchstone":
        path = resolve(require(table, "touchstone", str, source, where), scenario_path)
        try:
            return obj.touchstone_object(name, str(path), kind, description)
        except Exception as exc:  # noqa: BLE001 - scikit-rf raises many types for a bad file
            raise InputError(f"cannot read Touchstone file {path} ({exc})", path=source,
                             key=f"{where}.touchstone", fix="give a readable .s1p or .s2p file") from exc
    if form == "thru":
        return obj.thru(name, optional(table, "delay_s", 0.0, float, source, where),
                        optional(table, "loss_ohm_per_s", 0.0, float, source, where),
                        optional(table, "impedance_ohm", 50.0, float, source, where), description)
    if form == "circuit":
        made = _circuit(name, require(table, "circuit", list, source, where), kind, description, source, where)
        end = optional(table, "terminated_ohm", None, float, source, where)
        return made if end is None else obj.terminated(made, end)
    return obj.termination(
        name,
        require(table, "resistance_ohm", float, source, where),
        optional(table, "series_inductance_h", 0.0, float, source, where),
        optional(table, "shunt_capacitance_f", 0.0, float, source, where),
        kind=kind if kind != "object" else "termination",
        description=description,
    )


def _circuit(name: str, elements: list[Any], kind: str, description: str, source: str,
             where: str) -> obj.BenchObject:
    try:
        made = obj.two_port_from_elements(name, elements, kind, description)
        made.response(np.array([1e8, 2e8]))
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise InputError(f"bad circuit ({exc})", path=source, key=f"{where}.circuit",
                         fix=f"each element is a table such as {{ element = \"series_inductor\", henry = 2e-9 }}; "
                             f"elements: {', '.join(obj.ELEMENT_KINDS)}") from exc
    return made


# -- [[populations]] ----------------------------------------------------------------------------

def population(table: Any, rng: np.random.Generator, source: str, index: int) -> list[tuple[str, str, obj.BenchObject]]:
    """The units of one population: each element value spread by ``spread`` (relative,
    normal), then the defects of named units applied."""
    where = f"populations[{index}]"
    if not isinstance(table, dict):
        raise InputError("a population is a table", path=source, key=where, fix="write [[populations]] tables")
    model = require(table, "model", str, source, where)
    prefix = require(table, "serial_prefix", str, source, where)
    count = require(table, "count", int, source, where)
    first = optional(table, "first_serial", 1, int, source, where)
    spread = optional(table, "spread", 0.0, float, source, where)
    circuit = require(table, "circuit", list, source, where)
    defects = optional(table, "defects", {}, dict, source, where)
    made = []
    for number in range(first, first + count):
        serial = f"{prefix}{number:04d}"
        elements = []
        for element in circuit:
            varied = dict(element) if isinstance(element, dict) else element
            if isinstance(element, dict):
                for key, value in element.items():
                    if isinstance(value, (int, float)) and not isinstance(value, bool):
                        varied[key] = value * (1 + spread * rng.normal())
            elements.append(varied)
        for change in defects.get(serial, []):
            try:
                position = int(change["index"])
                elements[position] = {**elements[position], **{k: v for k, v in change.items() if k != "index"}}
            except (KeyError, TypeError, ValueError, IndexError) as exc:
                raise InputError(f"bad defect ({exc})", path=source, key=f"{where}.defects.{serial}",
                                 fix="write [{ index = <element number from 0>, <key> = <value> }]") from exc
        made.append((serial, model, _circuit(serial, elements, "device", model, source, f"{where}")))
    unknown_units = set(defects) - {serial for serial, _, _ in made}
    if unknown_units:
        raise InputError("a defect names no unit of this population", path=source,
                         key=f"{where}.defects.{sorted(unknown_units)[0]}",
                         fix=f"serials run {prefix}{first:04d}..{prefix}{first + count - 1:04d}")
    return made
