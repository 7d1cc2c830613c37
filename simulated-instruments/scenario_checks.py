"""Checking the values of a scenario file: each key's type from the dataclass field it fills,
its range, and the line of the file that sets it.

A scenario fills frozen dataclasses (:class:`AnalyzerSimulationSettings`,
:class:`SwitchSettings`, ...), so their type hints say what each key must be; the ranges are
in :data:`ANALYZER_RANGES`, :data:`SWITCH_RANGES` and beside the code that reads the other
tables.  Every problem is an :class:`InputError` naming the file, the key (``analyzer.port[0].
ripple``: tables of an array counted from 0), the line where it can be found and the fix.
"""

from __future__ import annotations

import dataclasses
import json
import math
import re
import typing
from collections.abc import Callable, Mapping
from typing import Any

from lineproof.errors import InputError

# -- typed values --------------------------------------------------------------------------

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
        raise InputError(f"wrong type: {value!r:.60} is not {wanted}", path=source, key=key, fix=f"write {wanted}")
    return value


#: Python types a TOML value may have for each field type of a settings dataclass.
_KINDS: dict[object, tuple[type, ...]] = {
    str: (str,), int: (int,), float: (float,), bool: (bool,), int | None: (int,),
}


@dataclasses.dataclass(frozen=True)
class Range:
    """Where a number must lie; ``fix`` says why, in the user's words."""

    low: float | None = None
    high: float | None = None
    low_open: bool = False  # low itself is excluded
    fix: str = ""

    def check(self, value: float, source: str, key: str) -> None:
        finite(value, source, key)
        below = self.low is not None and (value <= self.low if self.low_open else value < self.low)
        above = self.high is not None and value > self.high
        if below or above:
            raise InputError(f"{value!r} is out of range ({self.describe()})", path=source, key=key,
                             fix=self.fix or f"write a number {self.describe()}")

    def describe(self) -> str:
        parts = []
        if self.low is not None:
            parts.append(f"{'>' if self.low_open else '>='} {_number(self.low)}")
        if self.high is not None:
            parts.append(f"<= {_number(self.high)}")
        return " and ".join(parts)


def _number(value: float) -> str:
    return str(int(value)) if float(value).is_integer() and abs(value) < 1e15 else f"{value:g}"


NOT_NEGATIVE = Range(0.0)
POSITIVE = Range(0.0, low_open=True)
SEED = Range(0, fix="a seed is a whole number 0 or more (numpy's generators take no negative seed)")
TIME_SCALE = Range(0.0, fix="0 (sweeps finish at once), 1 (real time) or any factor in between or above")
REFLECTION = Range(0.0, 1.0, fix="a magnitude of reflection, from 0 (none) to 1 (total)")
AT_MOST_0_DB = Range(None, 0.0, fix="a level relative to full reflection, in dB: 0 or below, e.g. -90")
#: Sweep points a simulated analyzer may allow (the control channel's grid limit as well).
MAX_POINTS_LIMIT = 1_000_001

ANALYZER_RANGES: dict[str, Range] = {
    "ports": Range(1, 2, fix="1 (reflection) or 2 (forward, full)"),
    "frequency_min_hz": Range(0.0, low_open=True, fix="a frequency above 0 Hz, e.g. 1e6"),
    "frequency_max_hz": Range(0.0, low_open=True, fix="a frequency above frequency_min_hz, e.g. 3e9"),
    "max_points": Range(1, MAX_POINTS_LIMIT, fix=f"a whole number of points from 1 to {MAX_POINTS_LIMIT}, e.g. 10001"),
    "noise_floor_db": AT_MOST_0_DB,
    "trace_noise": Range(0.0, 1.0, fix="a relative 1-sigma noise from 0 to 1, e.g. 2e-5"),
    "connection_repeatability": REFLECTION,
    "per_point_s": NOT_NEGATIVE,
    "sweep_overhead_s": NOT_NEGATIVE,
    "time_scale": TIME_SCALE,
    "seed": SEED,
    "session_seed": SEED,
    "residual_directivity_db": AT_MOST_0_DB,
    "residual_source_match_db": AT_MOST_0_DB,
}
PORT_RANGES: dict[str, Range] = {
    "cable_delay_s": NOT_NEGATIVE,
    "coupler_delay_s": NOT_NEGATIVE,
    "ripple": Range(0.0, 1.0, fix="a relative magnitude ripple from 0 to 1, e.g. 0.25"),
    "ripple_period_hz": Range(0.0, low_open=True, fix="a period above 0 Hz, e.g. 310e6"),
}
SWITCH_RANGES: dict[str, Range] = {
    "modules": Range(1, 99, fix="a whole number of modules from 1 to 99"),
    "channels_per_module": Range(1, 999, fix="a whole number of channels from 1 to 999"),
    "path_mismatch": REFLECTION,
    "path_loss_db": Range(0.0, fix="a path's insertion loss in dB, 0 or more (a switch has no gain)"),
    "path_delay_s": NOT_NEGATIVE,
    "path_delay_spread_s": NOT_NEGATIVE,
    "repeatability": REFLECTION,
    "settle_s": NOT_NEGATIVE,
    "time_scale": TIME_SCALE,
    "seed": SEED,
}


def typed_fields(table: Mapping[str, Any], settings_class: type, ranges: Mapping[str, Range], source: str,
                 where: str, skip: frozenset[str] = frozenset()) -> dict[str, Any]:
    """The keys of ``table`` that are plain fields of ``settings_class`` (all but ``skip``),
    each of its field's type, finite and within its range."""
    hints = typing.get_type_hints(settings_class)
    defaults = {item.name: item.default for item in dataclasses.fields(settings_class)}
    values: dict[str, Any] = {}
    for key in table:
        if key in skip or hints.get(key) not in _KINDS:
            continue
        try:
            value = optional(table, key, None, _KINDS[hints[key]], source, where)
        except InputError as exc:
            example = defaults.get(key)
            if example is None or example is dataclasses.MISSING:
                raise
            raise InputError(exc.problem, path=source, key=exc.key,
                             fix=f"{exc.fix}, e.g. {key} = {_toml(example)} (the default)") from exc
        if isinstance(value, float):
            finite(value, source, f"{where}.{key}")
        if key in ranges:
            ranges[key].check(value, source, f"{where}.{key}")
        values[key] = value
    return values


def _toml(value: object) -> str:
    if isinstance(value, bool):
        return str(value).lower()
    return json.dumps(value) if isinstance(value, str) else repr(value)


def finite(value: float, source: str, key: str) -> float:
    if not math.isfinite(value):
        raise InputError(f"{value!r} is not a finite number", path=source, key=key,
                         fix="write a number (TOML's inf and nan are not values a bench can have)")
    return value


def identity_problem(identity: str) -> str | None:
    """Why ``identity`` cannot be an IEEE 488.2 *IDN? reply (§10.14: four fields --
    manufacturer, model, serial number, firmware -- separated by commas), or None."""
    fields = identity.split(",")
    if len(fields) != 4 or not all(field.strip() for field in fields):
        return f"{identity!r} has {len(fields)} comma-separated field(s), not four non-empty ones"
    if not identity.isascii() or not identity.isprintable() or ";" in identity:
        return f"{identity!r} must be printable ASCII without ';' (it is sent as a response message)"
    return None


def check_identity(table: Mapping[str, Any], source: str, where: str) -> None:
    identity = table.get("identity")
    problem = identity_problem(identity) if isinstance(identity, str) else None
    if problem:
        raise InputError(problem, path=source, key=f"{where}.identity",
                         fix='write "maker,model,serial,firmware", e.g. "Tarnmoor Instruments,SIM-R1,SIM0001,1.0"')


# -- where a key is set --------------------------------------------------------------------

_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\[\]]+?)\s*\]\]?\s*(#.*)?$")
_KEY = re.compile(r'^\s*((?:[A-Za-z0-9_-]+|"[^"]*"|\'[^\']*\')(?:\s*\.\s*(?:[A-Za-z0-9_-]+|"[^"]*"|\'[^\']*\'))*)\s*=')
_PART = re.compile(r'"([^"]*)"|\'([^\']*)\'|([A-Za-z0-9_-]+)')


def _parts(text: str) -> list[str]:
    return [quoted or literal or bare for quoted, literal, bare in _PART.findall(text)]


class ScenarioLines:
    """The line of each key path of a scenario (or kit) file, as the scenario's errors name
    them: ``bench.seed``, ``analyzer.port[0].ripple``, ``objects.load-a.resistance_ohm``.
    A plain line scan for the layouts scenario files use (headers, ``key = value`` lines,
    arrays spread over lines); a key it cannot place falls back to its table's line."""

    def __init__(self, text: str) -> None:
        self._found: dict[str, int] = {}
        arrays: dict[str, int] = {}
        table = ""
        depth = 0
        for number, line in enumerate(text.splitlines(), start=1):
            if depth > 0:  # inside a value spread over lines
                depth += _bracket_balance(line)
                continue
            header = _HEADER.match(line)
            if header:
                table = self._header(header.group(1) == "[[", _parts(header.group(2)), arrays, number)
                continue
            key = _KEY.match(line)
            if key:
                path = ".".join([table, *_parts(key.group(1))]) if table else ".".join(_parts(key.group(1)))
                self._found.setdefault(path, number)
                depth = max(0, _bracket_balance(line[key.end():]))

    def _header(self, is_array: bool, parts: list[str], arrays: dict[str, int], number: int) -> str:
        path = ""
        for index, part in enumerate(parts):
            path = f"{path}.{part}" if path else part
            if is_array and index == len(parts) - 1:
                arrays[path] = arrays.get(path, -1) + 1
            if path in arrays:
                path = f"{path}[{arrays[path]}]"
            self._found.setdefault(path, number)
            self._found.setdefault(re.sub(r"\[\d+\]$", "", path), number)
        return path

    def line_of(self, key: str | None) -> int | None:
        """The line of ``key``, else of its nearest parent that has one."""
        while key:
            if key in self._found:
                return self._found[key]
            trimmed = re.sub(r"(\[\d+\]|\.[^.\[\]]+)$", "", key)
            if trimmed == key:
                return None
            key = trimmed
        return None


def _bracket_balance(text: str) -> int:
    """Opening minus closing brackets and braces outside strings and comments."""
    balance, quote = 0, ""
    for char in text:
        if quote:
            quote = "" if char == quote else quote
        elif char in "\"'":
            quote = char
        elif char == "#":
            break
        elif char in "[{":
            balance += 1
        elif char in "]}":
            balance -= 1
    return balance


def with_line(read: Callable[[], Any], text: str, source: str) -> Any:
    """``read()``, with the line added to an InputError about ``source`` that names a key but
    no line."""
    try:
        return read()
    except InputError as exc:
        if exc.line is not None or exc.path != source or not exc.key:
            raise
        line = ScenarioLines(text).line_of(exc.key)
        if line is None:
            raise
        raise InputError(exc.problem, path=exc.path, key=exc.key, line=line, fix=exc.fix) from exc
