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
from lineproof.simulators.scenario_checks import optional, refuse_unknown, require, with_line

#: The keys an [objects.<name>] table may hold, by what it describes.
_OBJECT_KEYS = {
    "termination": {"resistance_ohm", "series_inductance_h", "shunt_capacitance_f"},
    "thru": {"delay_s", "loss_ohm_per_s", "impedance_ohm"},
    "circuit": {"circuit", "terminated_ohm"},
    "touchstone": {"touchstone"},
}
_COMMON_KEYS = {"kind", "description"}


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
    source = str(kit_path)
    try:
        text = kit_path.read_text(encoding="utf-8")
        kit = tomllib.loads(text)
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise InputError(f"cannot read cal kit ({exc})", path=source,
                         fix="name a readable cal-kit TOML file in [standards] kit") from exc
    return with_line(lambda: _actual_standards(kit, source, deviation, seed), text, source)


_STANDARD_KINDS = ("open", "short", "load", "thru")


def _actual_standards(kit: dict[str, Any], source: str, deviation: float, seed: int) -> dict[str, obj.BenchObject]:
    z0 = _kit_number(optional(kit, "kit", {}, dict, source, ""), "reference_impedance_ohm", 50.0, source, "kit",
                     positive=True)
    rng = np.random.default_rng(seed)
    made: dict[str, obj.BenchObject] = {}
    for name, definition in optional(kit, "standards", {}, dict, source, "").items():
        where = f"standards.{name}"
        if not isinstance(definition, dict):
            raise InputError("a standard is a table", path=source, key=where, fix=f"write [standards.{name}]")
        kind = require(definition, "kind", str, source, where)
        if kind not in _STANDARD_KINDS:
            raise InputError(f"unknown standard kind {kind!r}", path=source, key=f"{where}.kind",
                             fix=f"use one of: {', '.join(_STANDARD_KINDS)}")
        delay = _kit_number(definition, "offset_delay_s", 0.0, source, where) + deviation * rng.normal(0, 0.5e-12)
        loss = _kit_number(definition, "offset_loss_ohm_per_s", 0.0, source, where)
        z_offset = _kit_number(definition, "offset_impedance_ohm", z0, source, where, positive=True)
        if kind == "open":
            c = _polynomial(definition, "capacitance", source, where)
            c = c * (1 + deviation * rng.normal(0, 0.03))

            def open_end(f: np.ndarray, c: np.ndarray = c) -> np.ndarray | None:
                cap = c[0] + c[1] * f + c[2] * f**2 + c[3] * f**3
                return 1 / (1j * 2 * np.pi * f * cap) if np.any(cap) else None

            made[name] = obj.offset_standard(name, open_end, z_offset, delay, loss, z0, "open")
        elif kind == "short":
            inductance = _polynomial(definition, "inductance", source, where)
            inductance = inductance + deviation * np.array([rng.normal(0, 2e-12), 0, 0, 0])

            def short_end(f: np.ndarray, ind: np.ndarray = inductance) -> np.ndarray:
                return 1j * 2 * np.pi * f * (ind[0] + ind[1] * f + ind[2] * f**2 + ind[3] * f**3)

            made[name] = obj.offset_standard(name, short_end, z_offset, max(delay, 0.0), loss, z0, "short")
        elif kind == "thru":
            made[name] = obj.thru(name, max(delay, 0.0), loss, z_offset)
        else:
            return_loss_db = rng.uniform(40.0, 45.0)
            magnitude = deviation * 10 ** (-return_loss_db / 20)
            made[name] = obj.reflection_from_polar(name, magnitude, rng.uniform(0, 2 * np.pi), 40e-12, "load")
    return made


def _kit_number(table: dict[str, Any], key: str, default: float, source: str, where: str,
                positive: bool = False) -> float:
    """A kit's delay, loss or impedance: a finite number, not negative (an impedance above 0)."""
    value = optional(table, key, default, float, source, where)
    if not np.isfinite(value) or value < 0 or (positive and value == 0):
        raise InputError(f"{value!r} is not a {'positive' if positive else 'non-negative'} finite number",
                         path=source, key=f"{where}.{key}",
                         fix="a delay or loss is 0 or more, an impedance more than 0 (as the kit's data sheet gives)")
    return value


def _polynomial(definition: dict[str, Any], key: str, source: str, where: str) -> np.ndarray:
    """A fringing capacitance or inductance polynomial [c0, c1, c2, c3] (fewer: the rest 0)."""
    raw = optional(definition, key, [0.0], list, source, where)
    if not (1 <= len(raw) <= 4 and all(isinstance(v, (int, float)) and not isinstance(v, bool) and np.isfinite(v)
                                       for v in raw)):
        raise InputError(f"{raw!r} is not a list of one to four numbers", path=source, key=f"{where}.{key}",
                         fix=f"write {key} = [c0, c1, c2, c3] (F, F/Hz, F/Hz^2, F/Hz^3 or H, H/Hz, ...)")
    return np.array([float(v) for v in raw] + [0.0] * (4 - len(raw)))


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
        return obj.thru(name, _value(table, "delay_s", 0.0, source, where),
                        _value(table, "loss_ohm_per_s", 0.0, source, where),
                        _value(table, "impedance_ohm", 50.0, source, where, positive=True), description)
    if form == "circuit":
        made = _circuit(name, require(table, "circuit", list, source, where), kind, description, source, where)
        end = _value(table, "terminated_ohm", None, source, where)
        return made if end is None else obj.terminated(made, end)
    return obj.termination(
        name,
        _value(table, "resistance_ohm", None, source, where, required=True),
        _value(table, "series_inductance_h", 0.0, source, where),
        _value(table, "shunt_capacitance_f", 0.0, source, where),
        kind=kind if kind != "object" else "termination",
        description=description,
    )


def _value(table: dict[str, Any], key: str, default: float | None, source: str, where: str,
           positive: bool = False, required: bool = False) -> Any:
    """A physical value of an object (ohm, henry, farad, second): finite and not negative
    (an impedance that divides: above 0)."""
    value = require(table, key, float, source, where) if required else optional(table, key, default, float,
                                                                                 source, where)
    if value is not None and (not np.isfinite(value) or value < 0 or (positive and value == 0)):
        raise InputError(f"{value!r} is not a {'positive' if positive else 'non-negative'} finite number",
                         path=source, key=f"{where}.{key}",
                         fix="a passive part has no negative resistance, inductance, capacitance, delay or loss")
    return value


#: Element values that divide (series capacitor, shunt inductor or resistor, line impedance).
_DIVIDING = {("series_capacitor", "farad"), ("shunt_inductor", "henry"), ("shunt_resistor", "ohm"), ("line", "ohm")}


def _circuit(name: str, elements: list[Any], kind: str, description: str, source: str,
             where: str) -> obj.BenchObject:
    for position, element in enumerate(elements):
        for key, value in element.items() if isinstance(element, dict) else ():
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                continue
            dividing = (element.get("element"), key) in _DIVIDING
            if not np.isfinite(value) or value < 0 or (dividing and value == 0):
                raise InputError(f"{name}: element {position} has {key} = {value!r}", path=source,
                                 key=f"{where}.circuit[{position}].{key}",
                                 fix=f"a passive element's {key} is a finite number, "
                                     f"{'above' if dividing else 'at least'} 0 (with a population's spread: "
                                     f"a smaller spread)")
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
    spread = _value(table, "spread", 0.0, source, where)
    if count < 1 or first < 0:
        key, value = ("count", count) if count < 1 else ("first_serial", first)
        raise InputError(f"{key} = {value} is out of range", path=source, key=f"{where}.{key}",
                         fix="count is 1 or more units, first_serial 0 or more")
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
        made.append((serial, model, _circuit(serial, elements, "device", model, source, where)))
    unknown_units = set(defects) - {serial for serial, _, _ in made}
    if unknown_units:
        raise InputError("a defect names no unit of this population", path=source,
                         key=f"{where}.defects.{sorted(unknown_units)[0]}",
                         fix=f"serials run {prefix}{first:04d}..{prefix}{first + count - 1:04d}")
    return made
