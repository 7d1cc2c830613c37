"""Instrument profiles: declarative TOML files mapping abstract operations to command
templates and reply formats, plus the instrument's capabilities.

A template is plain text with ``{field}`` or ``{field:spec}`` slots.  Only the fields an
operation documents may appear, and the spec may hold only the characters of a numeric
format spec: templates are filled in, never evaluated.
"""

from __future__ import annotations

import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

from lineproof.errors import InputError

#: Operations an analyzer profile may define, with the fields each template may use.
ANALYZER_OPERATIONS: dict[str, frozenset[str]] = {
    "identify": frozenset(),
    "reset": frozenset(),
    "clear": frozenset(),
    "wait": frozenset(),
    "next_error": frozenset(),
    "set_start": frozenset({"start_hz"}),
    "set_stop": frozenset({"stop_hz"}),
    "set_points": frozenset({"points"}),
    "set_if_bandwidth": frozenset({"if_bandwidth_hz"}),
    "set_power": frozenset({"power_dbm"}),
    "single_sweep_mode": frozenset(),
    "select_parameter": frozenset({"parameter"}),
    "trigger": frozenset(),
    "set_data_format": frozenset(),
    "read_raw": frozenset({"parameter"}),
    "read_corrected": frozenset({"parameter"}),
    "read_frequencies": frozenset(),
}
REQUIRED_ANALYZER_OPERATIONS = ("identify", "set_start", "set_stop", "set_points", "trigger", "read_raw")

#: Reply formats an operation may declare.
REPLY_KINDS = frozenset({"none", "text", "identity", "complete", "error-entry", "numbers", "block"})

_SLOT = re.compile(r"\{([^{}]*)\}")
_SLOT_BODY = re.compile(r"^([a-z_]+)(?::([0-9.,+\- #eEfFgGd]*))?$")


@dataclass(frozen=True)
class Operation:
    """One abstract operation: what to send and what comes back."""

    send: str
    reply: str = "none"

    def render(self, **values: Any) -> str:
        """Fill the template's slots from ``values`` (already validated at load time)."""

        def fill(match: re.Match[str]) -> str:
            name, spec = _SLOT_BODY.match(match.group(1)).groups()
            return format(values[name], spec or "")

        return _SLOT.sub(fill, self.send)


@dataclass(frozen=True)
class AnalyzerCapabilities:
    ports: int
    paths: str  # "reflection" | "forward" | "full"
    frequency_min_hz: float
    frequency_max_hz: float
    max_points: int
    parameters: tuple[str, ...]
    raw_data: bool
    corrected_data: bool
    data_format: str  # "REAL,64" | "REAL,32" | "ASCII"
    byte_order: str  # "big" | "little"


@dataclass(frozen=True)
class Timing:
    """How long an operation may take, scaled from the expected sweep time."""

    command_timeout_s: float = 5.0
    sweep_overhead_s: float = 0.002
    settle_per_point_s: float = 0.0
    sweep_timeout_margin: float = 3.0


@dataclass(frozen=True)
class AnalyzerProfile:
    name: str
    summary: str
    source: str
    link: Mapping[str, Any]
    capabilities: AnalyzerCapabilities
    timing: Timing
    operations: Mapping[str, Operation] = field(default_factory=dict)

    def operation(self, name: str) -> Operation | None:
        return self.operations.get(name)


class _Reader:
    """Typed access to a parsed TOML table that names file and key in every error."""

    def __init__(self, data: Mapping[str, Any], path: str, prefix: str = "") -> None:
        self.data = data
        self.path = path
        self.prefix = prefix

    def key(self, name: str) -> str:
        return f"{self.prefix}{name}"

    def table(self, name: str, required: bool = True) -> _Reader:
        value = self.data.get(name)
        if value is None and not required:
            return _Reader({}, self.path, f"{self.key(name)}.")
        if not isinstance(value, dict):
            raise InputError(
                "missing table" if value is None else "must be a table",
                path=self.path, key=self.key(name), fix=f"add a [{self.key(name)}] table",
            )
        return _Reader(value, self.path, f"{self.key(name)}.")

    def get(self, name: str, kind: type | tuple[type, ...], default: Any = ..., fix: str = "") -> Any:
        if name not in self.data:
            if default is ...:
                raise InputError("missing key", path=self.path, key=self.key(name), fix=fix or f"add {name} = ...")
            return default
        value = self.data[name]
        kinds = kind if isinstance(kind, tuple) else (kind,)
        if float in kinds and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)
        if not isinstance(value, kinds) or (isinstance(value, bool) and bool not in kinds):
            expected = " or ".join(k.__name__ for k in kinds)
            raise InputError(
                f"must be {expected}, got {type(value).__name__} {value!r}",
                path=self.path, key=self.key(name), fix=fix or f"give {name} as {expected}",
            )
        return value

    def reject_unknown(self, allowed: set[str] | frozenset[str]) -> None:
        for name in self.data:
            if name not in allowed:
                raise InputError(
                    "unknown key", path=self.path, key=self.key(name),
                    fix=f"remove it or use one of: {', '.join(sorted(allowed))}",
                )


def _parse_operation(reader: _Reader, name: str, fields: frozenset[str]) -> Operation:
    raw = reader.data[name]
    key = reader.key(name)
    if isinstance(raw, str):
        raw = {"send": raw}
    if not isinstance(raw, dict):
        raise InputError("must be a string or a table {send = ..., reply = ...}", path=reader.path, key=key)
    table = _Reader(raw, reader.path, f"{key}.")
    table.reject_unknown({"send", "reply"})
    send = table.get("send", str)
    reply = table.get("reply", str, "none")
    if reply not in REPLY_KINDS:
        raise InputError(
            f"unknown reply format {reply!r}", path=reader.path, key=f"{key}.reply",
            fix=f"use one of: {', '.join(sorted(REPLY_KINDS))}",
        )
    for slot in _SLOT.findall(send):
        match = _SLOT_BODY.match(slot)
        if not match or match.group(1) not in fields:
            allowed = ", ".join(sorted(fields)) or "none"
            raise InputError(
                f"template slot {{{slot}}} is not allowed here",
                path=reader.path, key=f"{key}.send",
                fix=f"use only these slots: {allowed} (with an optional numeric format such as :.0f)",
            )
    if "{" in _SLOT.sub("", send) or "}" in _SLOT.sub("", send):
        raise InputError("unbalanced brace in template", path=reader.path, key=f"{key}.send")
    return Operation(send=send, reply=reply)


def _parse_capabilities(reader: _Reader) -> AnalyzerCapabilities:
    reader.reject_unknown({
        "ports", "paths", "frequency_min_hz", "frequency_max_hz", "max_points", "parameters",
        "raw_data", "corrected_data", "data_format", "byte_order",
    })
    paths = reader.get("paths", str)
    if paths not in ("reflection", "forward", "full"):
        raise InputError(f"unknown path set {paths!r}", path=reader.path, key=reader.key("paths"),
                         fix="use reflection (1-port), forward (one-path 2-port) or full")
    data_format = reader.get("data_format", str, "REAL,64")
    if data_format not in ("REAL,64", "REAL,32", "ASCII"):
        raise InputError(f"unknown data format {data_format!r}", path=reader.path,
                         key=reader.key("data_format"), fix="use REAL,64, REAL,32 or ASCII")
    byte_order = reader.get("byte_order", str, "big")
    if byte_order not in ("big", "little"):
        raise InputError(f"unknown byte order {byte_order!r}", path=reader.path,
                         key=reader.key("byte_order"), fix="use big or little")
    low = reader.get("frequency_min_hz", float)
    high = reader.get("frequency_max_hz", float)
    if not 0 < low < high:
        raise InputError("frequency range must satisfy 0 < min < max", path=reader.path,
                         key=reader.key("frequency_max_hz"))
    max_points = reader.get("max_points", int)
    if max_points < 2:
        raise InputError("max_points must be at least 2", path=reader.path, key=reader.key("max_points"))
    parameters = reader.get("parameters", list)
    if not parameters or not all(isinstance(p, str) and re.fullmatch(r"S[1-4][1-4]", p) for p in parameters):
        raise InputError("parameters must be a non-empty list such as [\"S11\", \"S21\"]",
                         path=reader.path, key=reader.key("parameters"))
    return AnalyzerCapabilities(
        ports=reader.get("ports", int),
        paths=paths,
        frequency_min_hz=low,
        frequency_max_hz=high,
        max_points=max_points,
        parameters=tuple(parameters),
        raw_data=reader.get("raw_data", bool, True),
        corrected_data=reader.get("corrected_data", bool, False),
        data_format=data_format,
        byte_order=byte_order,
    )


def _parse_timing(reader: _Reader) -> Timing:
    reader.reject_unknown({"command_timeout_s", "sweep_overhead_s", "settle_per_point_s", "sweep_timeout_margin"})
    defaults = Timing()
    return Timing(
        command_timeout_s=reader.get("command_timeout_s", float, defaults.command_timeout_s),
        sweep_overhead_s=reader.get("sweep_overhead_s", float, defaults.sweep_overhead_s),
        settle_per_point_s=reader.get("settle_per_point_s", float, defaults.settle_per_point_s),
        sweep_timeout_margin=reader.get("sweep_timeout_margin", float, defaults.sweep_timeout_margin),
    )


def _load_toml(text: str, source: str) -> dict[str, Any]:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc})", path=source, fix="correct the TOML syntax") from exc


def _with_base(data: dict[str, Any], source: str, depth: int = 0) -> dict[str, Any]:
    """Merge a profile over the shipped profile it names in ``profile.based_on``: each
    table of the base is updated key by key, so a variant states only what differs."""
    head = data.get("profile")
    base_name = head.get("based_on") if isinstance(head, dict) else None
    if base_name is None:
        return data
    if not isinstance(base_name, str) or depth > 4:
        raise InputError("based_on must name one shipped profile (and not form a loop)",
                         path=source, key="profile.based_on")
    base_text, base_source = _shipped_text(base_name)
    merged = _with_base(_load_toml(base_text, base_source), base_source, depth + 1)
    for table, values in data.items():
        if isinstance(values, dict) and isinstance(merged.get(table), dict):
            merged[table] = {**merged[table], **values}
        else:
            merged[table] = values
    merged["profile"].pop("based_on", None)
    return merged


def parse_analyzer_profile(text: str, source: str) -> AnalyzerProfile:
    """Validate and build an analyzer profile from TOML text; ``source`` names it in errors."""
    data = _with_base(_load_toml(text, source), source)
    root = _Reader(data, source)
    root.reject_unknown({"profile", "link", "capabilities", "timing", "operations"})
    head = root.table("profile")
    head.reject_unknown({"name", "kind", "summary", "based_on"})
    kind = head.get("kind", str)
    if kind != "analyzer":
        raise InputError(f"expected kind = \"analyzer\", got {kind!r}", path=source, key="profile.kind")
    link = root.table("link", required=False)
    link.reject_unknown({"write_termination", "read_termination"})
    operations_reader = root.table("operations")
    operations_reader.reject_unknown(set(ANALYZER_OPERATIONS))
    operations = {
        name: _parse_operation(operations_reader, name, ANALYZER_OPERATIONS[name])
        for name in operations_reader.data
    }
    for name in REQUIRED_ANALYZER_OPERATIONS:
        if name not in operations:
            raise InputError("missing operation", path=source, key=f"operations.{name}",
                             fix=f"add {name} = {{ send = \"...\" }}")
    return AnalyzerProfile(
        name=head.get("name", str),
        summary=head.get("summary", str, ""),
        source=source,
        link=dict(link.data),
        capabilities=_parse_capabilities(root.table("capabilities")),
        timing=_parse_timing(root.table("timing", required=False)),
        operations=operations,
    )


def shipped_profile_names() -> list[str]:
    folder = resources.files("lineproof.drivers") / "profiles"
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))


def _shipped_text(name: str) -> tuple[str, str]:
    shipped = resources.files("lineproof.drivers") / "profiles" / f"{name}.toml"
    if not re.fullmatch(r"[a-z0-9][a-z0-9-]*", name) or not shipped.is_file():
        raise InputError(f"no shipped profile named {name!r}", key="profile",
                         fix=f"use one of {', '.join(shipped_profile_names())} or a path to a .toml file")
    return shipped.read_text(encoding="utf-8"), f"profiles/{name}.toml"


def load_analyzer_profile(name_or_path: str | Path) -> AnalyzerProfile:
    """Load a shipped profile by name (``generic-scpi-analyzer``) or any profile file by path."""
    path = Path(name_or_path)
    if path.suffix == ".toml" or path.exists():
        try:
            text = path.read_text(encoding="utf-8")
        except OSError as exc:
            raise InputError(f"cannot read profile ({exc.strerror})", path=str(path)) from exc
        return parse_analyzer_profile(text, str(path))
    return parse_analyzer_profile(*_shipped_text(str(name_or_path)))
