"""Instrument profiles: declarative TOML files mapping abstract operations to command
templates and reply formats, plus the instrument's link framing, capabilities and timing.

A template is plain text with ``{field}`` or ``{field:spec}`` slots.  Only the fields an
operation documents may appear, and the spec may hold only the characters of a numeric
format spec: templates are filled in, never evaluated.  DEVELOPERS.md ("Adding an
instrument profile") documents every key with a worked example.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from lineproof.drivers import ieee488, line_protocol
from lineproof.drivers.profile_files import ProfileProblemList, TableReader, load_toml, profile_text, with_base
from lineproof.drivers.profile_files import shipped_profile_names as shipped_profile_names
from lineproof.errors import InputError

_SWEEP = frozenset({"start_hz", "stop_hz", "points"})


#: Reply formats an operation may declare.
REPLY_KINDS = ("none", "text", "identity", "complete", "status", "error-entry", "numbers", "block", "rows")
#: What a command (a setting, an action) may answer: nothing, one line (read and dropped), or
#: ``1`` when it is done (``INITiate;*OPC?``).
COMMAND_REPLIES = ("none", "text", "complete")
#: How a trace or a frequency list comes back.
TRACE_REPLIES = ("block", "numbers", "rows")


@dataclass(frozen=True)
class OperationSpec:
    """What the schema allows for one operation: its slots, whether repeating it is safe, and
    the reply kinds the driver can use (the first is the usual one)."""

    fields: frozenset[str] = frozenset()
    idempotent: bool = True
    replies: tuple[str, ...] = COMMAND_REPLIES


#: Operations every profile may define.  Settings and queries are idempotent (sending the
#: same value twice does no harm); actions (trigger, reset, clear) and reading the error
#: queue (which removes the entry) are not, and are never repeated after a lost link.
COMMON_OPERATIONS: dict[str, OperationSpec] = {
    "identify": OperationSpec(replies=("identity",)),
    "reset": OperationSpec(idempotent=False),
    "clear": OperationSpec(idempotent=False),
    # "complete": one query held open until pending operations end (*OPC?); "status": a status
    # register polled until done_bits show (after arm, e.g. *OPC then *ESR? bit 0).
    "wait": OperationSpec(replies=("complete", "status")),
    "next_error": OperationSpec(idempotent=False, replies=("error-entry",)),
    "event_status": OperationSpec(idempotent=False, replies=("text", "status")),
}

#: Operations an analyzer profile may define.
ANALYZER_OPERATIONS: dict[str, OperationSpec] = {
    **COMMON_OPERATIONS,
    "set_sweep": OperationSpec(_SWEEP),
    "set_start": OperationSpec(frozenset({"start_hz"})),
    "set_stop": OperationSpec(frozenset({"stop_hz"})),
    "set_points": OperationSpec(frozenset({"points"})),
    "set_if_bandwidth": OperationSpec(frozenset({"if_bandwidth_hz"})),
    "set_power": OperationSpec(frozenset({"power_dbm"})),
    "single_sweep_mode": OperationSpec(),
    "select_parameter": OperationSpec(frozenset({"parameter"})),
    "trigger": OperationSpec(idempotent=False),
    "set_data_format": OperationSpec(),
    "read_raw": OperationSpec(frozenset({"parameter"}), replies=TRACE_REPLIES),
    "read_corrected": OperationSpec(frozenset({"parameter"}), replies=TRACE_REPLIES),
    "read_frequencies": OperationSpec(replies=TRACE_REPLIES),
    "read_temperature": OperationSpec(replies=("numbers",)),
}
REQUIRED_ANALYZER_OPERATIONS = ("identify", "trigger", "read_raw")

#: Operations a switch profile may define; ``channels`` is a SCPI channel list "(@1!1,1!2)".
SWITCH_OPERATIONS: dict[str, OperationSpec] = {
    **COMMON_OPERATIONS,
    "open_all": OperationSpec(),
    "open_channels": OperationSpec(frozenset({"channels"})),
    "close_channels": OperationSpec(frozenset({"channels"})),
    "query_closed": OperationSpec(frozenset({"channels"}), replies=("numbers",)),
}
REQUIRED_SWITCH_OPERATIONS = ("identify", "close_channels", "query_closed")

#: Column names of a "rows" reply.
ROW_COLUMNS = ("frequency", "re", "im", "ignore")

_SLOT = re.compile(r"\{([^{}]*)\}")
_SLOT_BODY = re.compile(r"^([a-z_]+)(?::([0-9.,+\- #eEfFgGd]*))?$")


@dataclass(frozen=True)
class Operation:
    """One abstract operation: what to send and what comes back."""

    send: str
    reply: str = "none"
    idempotent: bool = True
    timeout_s: float | None = None
    columns: tuple[str, ...] = ()
    #: A polled wait: the command that arms the status bit (``*OPC``), sent once first.
    arm: str | None = None
    #: A polled wait: done when the status register reads with any of these bits set.
    done_bits: int = 0

    def render(self, **values: Any) -> str:
        """Fill the template's slots from ``values`` (already validated at load time)."""

        def fill(match: re.Match[str]) -> str:
            name, spec = _SLOT_BODY.match(match.group(1)).groups()
            return format(values[name], spec or "")

        return _SLOT.sub(fill, self.send)


@dataclass(frozen=True)
class LinkSettings:
    """Framing on the wire and, for serial links, the line settings the instrument uses."""

    write_termination: str = "\n"
    read_termination: str = "\n"
    echo: bool = False
    prompt: str | None = None
    error_line: str | None = None
    rows_end: str = "end"
    baud_rate: int = 115200
    byte_size: int = 8
    parity: str = "N"
    stop_bits: float = 1
    flow_control: str = "none"

    @property
    def needs_serial(self) -> bool:
        """A prompt ends replies on more than one byte: only the serial transport reads that."""
        return self.prompt is not None


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
    #: The instrument's own name for each parameter, where it differs ({"S11": "s11"}).
    parameter_names: Mapping[str, str] = field(default_factory=dict)

    def instrument_name(self, parameter: str) -> str:
        return self.parameter_names.get(parameter, parameter)


@dataclass(frozen=True)
class SwitchCapabilities:
    modules: int
    channels_per_module: int


@dataclass(frozen=True)
class Timing:
    """How long an operation may take, scaled from the expected sweep and transfer time."""

    command_timeout_s: float = 5.0
    sweep_overhead_s: float = 0.002
    settle_per_point_s: float = 0.0
    sweep_timeout_margin: float = 3.0
    transfer_timeout_margin: float = 2.0
    retries: int = 2


@dataclass(frozen=True)
class Profile:
    """What every profile kind has."""

    name: str
    kind: str
    summary: str
    source: str
    link: LinkSettings
    timing: Timing
    operations: Mapping[str, Operation]

    def operation(self, name: str) -> Operation | None:
        return self.operations.get(name)


@dataclass(frozen=True)
class AnalyzerProfile(Profile):
    capabilities: AnalyzerCapabilities | None = None


@dataclass(frozen=True)
class SwitchProfile(Profile):
    capabilities: SwitchCapabilities | None = None


def _check_template(reader: TableReader, key: str, send: str, fields: frozenset[str]) -> None:
    for slot in _SLOT.findall(send):
        match = _SLOT_BODY.match(slot)
        if not match or match.group(1) not in fields:
            reader.problem(key, f"template slot {{{slot}}} is not allowed here",
                           fix=f"use only these slots: {', '.join(sorted(fields)) or 'none'} "
                           "(with an optional numeric format such as :.0f)")
    if "{" in _SLOT.sub("", send) or "}" in _SLOT.sub("", send):
        reader.problem(key, "unbalanced brace in template",
                       fix="close every { with } around a slot name; braces cannot be sent literally")


def _either(kinds: tuple[str, ...]) -> str:
    quoted = [f'"{kind}"' for kind in kinds]
    return quoted[0] if len(quoted) == 1 else ", ".join(quoted[:-1]) + " or " + quoted[-1]


def _reply_fix(name: str, send: str, allowed: tuple[str, ...]) -> str:
    example = f"{name} = {{ send = {json.dumps(send)}, reply = \"{allowed[0]}\" }}"
    if len(allowed) == 1:
        return f"write {example}"
    return f"write e.g. {example} (reply may be {_either(allowed)}; see DEVELOPERS.md, the operations table)"


def _parse_operation(reader: TableReader, name: str, spec: OperationSpec) -> Operation | None:
    """The operation, or None when a problem (recorded) leaves it unusable."""
    raw = reader.data[name]
    if isinstance(raw, str):
        raw = {"send": raw}
    if not isinstance(raw, dict):
        reader.problem(name, "must be a string or a table {send = ..., reply = ...}",
                       fix=f'write {name} = "<command>" or {name} = {{ send = "<command>", reply = "..." }}')
        return None
    table = TableReader(raw, reader.path, f"{reader.key(name)}.", reader.problems)
    table.reject_unknown({"send", "reply", "idempotent", "timeout_s", "columns", "arm", "done_bits"})
    send = table.get("send", str)
    if send is not None:
        _check_template(reader, f"{name}.send", send, spec.fields)
    reply = table.choice("reply", REPLY_KINDS, "none")
    if reply is not None and reply not in spec.replies:
        table.problem("reply", f"{name} must reply {_either(spec.replies)}, not {reply!r}"
                      + (" (a plain string means no reply)" if isinstance(reader.data[name], str) else ""),
                      fix=_reply_fix(name, send or "...", spec.replies))
        reply = None
    columns = tuple(table.get("columns", list, []) or ())
    if reply == "rows":
        if not columns or not all(c in ROW_COLUMNS for c in columns):
            table.problem("columns", f"a rows reply needs columns from {', '.join(ROW_COLUMNS)}",
                          fix='e.g. columns = ["frequency", "re", "im"]')
    elif columns and reply is not None:
        table.problem("columns", "only a rows reply has columns", fix='remove it or set reply = "rows"')
    timeout = table.positive("timeout_s", None) if "timeout_s" in raw else None
    arm, done_bits = _parse_polling(table, name, reply)
    idempotent = table.get("idempotent", bool, spec.idempotent)
    if send is None or reply is None:
        return None
    return Operation(send=send, reply=reply, idempotent=bool(idempotent), timeout_s=timeout, columns=columns,
                     arm=arm, done_bits=done_bits)


def _parse_polling(table: TableReader, name: str, reply: str | None) -> tuple[str | None, int]:
    """``arm`` and ``done_bits`` of a polled wait (and of nothing else)."""
    if reply is None:
        return None, 0  # the reply's own problem is reported; what goes with it cannot be judged
    if not (name == "wait" and reply == "status"):
        for key in ("arm", "done_bits"):
            if key in table.data:
                table.problem(key, f"only a polled wait (wait with reply = \"status\") has {key}", fix="remove it")
        return None, 0
    done_bits = table.get("done_bits", int, fix='e.g. done_bits = 1 (bit 0 of *ESR?, Operation Complete)')
    if done_bits is not None and not 1 <= done_bits <= 0xFFFF:
        table.problem("done_bits", f"must be a bit mask 1..65535, got {done_bits}",
                      fix="give the bits that say the operation is done, e.g. 1 for bit 0 of *ESR?")
    arm = table.get("arm", str, None)
    if arm is not None:
        _check_template(table, "arm", arm, frozenset())
        if not arm.strip():
            table.problem("arm", "must not be empty", fix='e.g. arm = "*OPC", or remove it')
    return arm, done_bits or 0


def _parse_operations(root: TableReader, allowed: Mapping[str, OperationSpec],
                      required: tuple[str, ...]) -> tuple[dict[str, Operation], set[str]]:
    """The operations that could be read, and the names of every operation the file defines."""
    reader = root.table("operations")
    if reader is None:
        return {}, set()
    reader.reject_unknown(set(allowed))
    operations = {}
    for name in reader.data:
        if name in allowed:
            operation = _parse_operation(reader, name, allowed[name])
            if operation is not None:
                operations[name] = operation
    for name in required:
        if name not in reader.data:
            reader.problem(name, "missing operation", fix=f"add {name} = {{ send = \"...\" }}")
    return operations, set(reader.data)


def _parse_link(reader: TableReader | None) -> LinkSettings:
    defaults = LinkSettings()
    if reader is None:
        return defaults
    reader.reject_unknown(set(LinkSettings.__dataclass_fields__))
    for name in ("write_termination", "read_termination", "rows_end"):
        if reader.get(name, str, "x") == "":
            reader.problem(name, "must not be empty", fix='give it as e.g. "\\n"')
    error_line = reader.get("error_line", str, None)
    if error_line is not None:
        try:
            line_protocol.compile_error_pattern(error_line)
        except ieee488.CodecError as exc:
            reader.problem("error_line", str(exc), fix=r"e.g. '^\?(?P<code>\d+) (?P<text>.*)$'")
    prompt = reader.get("prompt", str, None)
    if prompt == "":
        reader.problem("prompt", "must not be empty", fix="remove it when the instrument sends no prompt")
    return LinkSettings(
        write_termination=reader.get("write_termination", str, defaults.write_termination),
        read_termination=reader.get("read_termination", str, defaults.read_termination),
        echo=reader.get("echo", bool, False),
        prompt=prompt or None,
        error_line=error_line,
        rows_end=reader.get("rows_end", str, defaults.rows_end),
        baud_rate=reader.whole("baud_rate", 1, None, defaults.baud_rate, fix="give the line's rate, e.g. baud_rate = 115200"),
        byte_size=_byte_size(reader),
        parity=reader.choice("parity", ("N", "E", "O", "M", "S"), defaults.parity),
        stop_bits=_stop_bits(reader),
        flow_control=reader.choice("flow_control", ("none", "rtscts", "xonxoff"), defaults.flow_control),
    )


def _byte_size(reader: TableReader) -> int | None:
    value = reader.get("byte_size", int, 8)
    if value is not None and value not in (5, 6, 7, 8):
        reader.problem("byte_size", f"must be 5, 6, 7 or 8, got {value}",
                       fix="give the data bits per character, usually byte_size = 8")
    return value


def _stop_bits(reader: TableReader) -> float | None:
    value = reader.get("stop_bits", float, LinkSettings().stop_bits)
    if value is not None and value not in (1, 1.5, 2):
        reader.problem("stop_bits", f"must be 1, 1.5 or 2, got {value:g}", fix="usually stop_bits = 1")
    return value


def _parse_timing(reader: TableReader | None) -> Timing:
    defaults = Timing()
    if reader is None:
        return defaults
    reader.reject_unknown(set(Timing.__dataclass_fields__))
    retries = reader.whole("retries", 0, 10, defaults.retries,
                           fix="give how often an idempotent query may be repeated, 0..10 (default 2)")
    return Timing(
        command_timeout_s=reader.positive("command_timeout_s", defaults.command_timeout_s),
        sweep_overhead_s=reader.non_negative("sweep_overhead_s", defaults.sweep_overhead_s,
                                             fix="give the sweep's fixed time in seconds, 0 or more"),
        settle_per_point_s=reader.non_negative("settle_per_point_s", defaults.settle_per_point_s,
                                               fix="give the time each point takes beyond 1/IF bandwidth, 0 or more"),
        sweep_timeout_margin=reader.positive("sweep_timeout_margin", defaults.sweep_timeout_margin),
        transfer_timeout_margin=reader.positive("transfer_timeout_margin", defaults.transfer_timeout_margin),
        retries=retries,
    )


def _parse_analyzer_capabilities(reader: TableReader | None) -> AnalyzerCapabilities | None:
    if reader is None:
        return None
    reader.reject_unknown(set(AnalyzerCapabilities.__dataclass_fields__))
    paths = reader.choice("paths", ("reflection", "forward", "full"),
                          fix="use reflection (1-port), forward (one-path 2-port) or full")
    ports = reader.whole("ports", 1, 4, fix="give the analyzer's test ports, 1 to 4 (parameters are named S11..S44)")
    if paths not in (None, "reflection") and ports is not None and ports < 2:
        reader.problem("paths", f"paths = {paths!r} measures transmission, which needs two ports, not {ports}",
                       fix='use paths = "reflection" for a one-port analyzer, or set ports = 2')
    low, high = _frequency_range(reader)
    max_points = reader.whole("max_points", 2, None,
                              fix="give the most points the instrument sweeps at once, e.g. max_points = 1601")
    parameters = _parameters(reader, ports)
    names = reader.get("parameter_names", dict, {}) or {}
    for key, value in names.items():
        if key not in (parameters or ()) or not isinstance(value, str) or not re.fullmatch(r"[\w:/.-]+", value):
            reader.problem(f"parameter_names.{key}", "must map a listed parameter to a plain name",
                           fix='e.g. parameter_names = { S11 = "s11" }')
    return AnalyzerCapabilities(
        ports=ports, paths=paths, frequency_min_hz=low, frequency_max_hz=high,
        max_points=max_points, parameters=tuple(parameters or ()),
        raw_data=reader.get("raw_data", bool, True), corrected_data=reader.get("corrected_data", bool, False),
        data_format=reader.choice("data_format", ("REAL,64", "REAL,32", "ASCII"), "REAL,64"),
        byte_order=reader.choice("byte_order", ("big", "little"), "big"),
        parameter_names=dict(names),
    )


def _parameters(reader: TableReader, ports: int | None) -> list[str] | None:
    parameters = reader.get("parameters", list)
    if parameters is None:
        return None
    if not parameters or not all(isinstance(p, str) and re.fullmatch(r"S[1-4][1-4]", p) for p in parameters):
        reader.problem("parameters", "parameters must be a non-empty list of S-parameter names",
                       fix='e.g. parameters = ["S11", "S21"]')
        return None
    beyond = [p for p in parameters if ports is not None and max(int(p[1]), int(p[2])) > ports]
    if beyond:
        reader.problem("parameters", f"{', '.join(beyond)} need{'s' if len(beyond) == 1 else ''} more than "
                       f"the {ports} port{'s' if ports > 1 else ''} of capabilities.ports",
                       fix=f"list only parameters of ports 1..{ports}, or set ports to the analyzer's number of ports")
    return parameters


def _frequency_range(reader: TableReader) -> tuple[float | None, float | None]:
    fix = "give the analyzer's range in Hz, finite and 0 < frequency_min_hz < frequency_max_hz, e.g. 100e3 and 6e9"
    low = reader.get("frequency_min_hz", float, fix=fix)
    high = reader.get("frequency_max_hz", float, fix=fix)
    if low is not None and not 0 < low < math.inf:
        reader.problem("frequency_min_hz", f"must be a finite frequency above 0 Hz, got {low!r}", fix=fix)
        low = None
    if low is not None and high is not None and not low < high < math.inf:
        reader.problem("frequency_max_hz", f"must be a finite frequency above frequency_min_hz ({low:g} Hz), "
                       f"got {high!r}", fix=fix)
    return low, high


def _parse_switch_capabilities(reader: TableReader | None) -> SwitchCapabilities | None:
    if reader is None:
        return None
    reader.reject_unknown(set(SwitchCapabilities.__dataclass_fields__))
    modules = reader.whole("modules", 1, None, fix="give the switch's number of modules, e.g. modules = 1")
    channels = reader.whole("channels_per_module", 1, None,
                            fix="give the channels of each module, e.g. channels_per_module = 8")
    return SwitchCapabilities(modules, channels)


def _parse_common(text: str, source: str, kind: str) -> tuple[TableReader, dict[str, Any]]:
    """The root table (collecting every problem, each with its line in ``text``) and what every
    profile kind has.  A profile of the other kind is refused at once: its keys would all be wrong."""
    root = TableReader(with_base(load_toml(text, source), source), source, "", ProfileProblemList(source, text))
    root.reject_unknown({"profile", "link", "capabilities", "timing", "operations"})
    head = root.table("profile")
    found = None
    if head is not None:
        head.reject_unknown({"name", "kind", "summary", "based_on"})
        found = head.get("kind", str)
        if found in ("analyzer", "switch") and found != kind:
            raise InputError(
                f"expected kind = \"{kind}\", got {found!r}", path=source, key="profile.kind",
                line=root.problems.lines.line_of("profile.kind"), fix=f"load it as a {found} profile")
        if found is not None and found != kind:
            head.problem("kind", f"expected kind = \"{kind}\", got {found!r}", fix=f'set kind = "{kind}"')
    common = {
        "name": head.get("name", str) if head is not None else None, "kind": kind,
        "summary": head.get("summary", str, "") if head is not None else "", "source": source,
        "link": _parse_link(root.table("link", required=False)),
        "timing": _parse_timing(root.table("timing", required=False)),
    }
    return root, common


def parse_analyzer_profile(text: str, source: str) -> AnalyzerProfile:
    """Validate and build an analyzer profile from TOML text; ``source`` names it in errors.
    Every problem of the file is reported at once (:class:`ProfileProblems` when there are several)."""
    root, common = _parse_common(text, source, "analyzer")
    operations, written = _parse_operations(root, ANALYZER_OPERATIONS, REQUIRED_ANALYZER_OPERATIONS)
    problems = root.problems
    if "set_sweep" not in written:
        for name in ("set_start", "set_stop", "set_points"):
            if name not in written:
                problems.add(f"operations.{name}", "missing operation",
                             fix=f"add {name}, or one set_sweep with {{start_hz}} {{stop_hz}} {{points}}")
    _check_sweep_end(operations, written, problems)
    capabilities = _parse_analyzer_capabilities(root.table("capabilities"))
    if capabilities is not None:
        _check_reads(operations, capabilities, common["link"], problems)
    problems.raise_if_any()
    return AnalyzerProfile(**common, operations=operations, capabilities=capabilities)


def _check_sweep_end(operations: Mapping[str, Operation], written: set[str], problems: ProfileProblemList) -> None:
    """Something must tell when a triggered sweep has ended: without it the trace read after
    the trigger may be the previous sweep's."""
    trigger = operations.get("trigger")
    if trigger is not None and trigger.reply == "none" and "wait" not in written:
        problems.add(
            "operations.wait",
            "the trigger has no reply and there is no wait operation: nothing would tell when the sweep "
            "ends, and the trace read after it could be the previous sweep's",
            fix='add wait = { send = "*OPC?", reply = "complete" } (or a polled wait: { send = "*ESR?", '
                'reply = "status", arm = "*OPC", done_bits = 1 }), or give the trigger the reply the '
                'instrument sends when the sweep ends (reply = "text" or "complete")',
        )


def _check_reads(operations: Mapping[str, Operation], capabilities: AnalyzerCapabilities,
                 link: LinkSettings, problems: ProfileProblemList) -> None:
    for name, needed in (("read_raw", {"re", "im"}), ("read_corrected", {"re", "im"}),
                         ("read_frequencies", {"frequency"})):
        operation = operations.get(name)
        if operation is None:
            continue
        if operation.reply == "rows" and not needed <= set(operation.columns):
            problems.add(f"operations.{name}.columns", f"columns must include {', '.join(sorted(needed))}",
                         fix='name each column the reply has, e.g. columns = ["frequency", "re", "im"]')
        if operation.reply == "block" and (link.needs_serial or capabilities.data_format == "ASCII"):
            problems.add(f"operations.{name}.reply", "a block reply needs message framing and a REAL data format",
                         fix='use reply = "rows" or "numbers"')


def parse_switch_profile(text: str, source: str) -> SwitchProfile:
    """Validate and build a switch-matrix profile from TOML text (every problem at once)."""
    root, common = _parse_common(text, source, "switch")
    operations, written = _parse_operations(root, SWITCH_OPERATIONS, REQUIRED_SWITCH_OPERATIONS)
    if "open_all" not in written and "open_channels" not in written:
        root.problems.add("operations.open_all", "missing operation",
                          fix="add open_all, or open_channels with a {channels} slot")
    capabilities = _parse_switch_capabilities(root.table("capabilities"))
    root.problems.raise_if_any()
    return SwitchProfile(**common, operations=operations, capabilities=capabilities)


def load_analyzer_profile(name_or_path: str | Path) -> AnalyzerProfile:
    """Load a shipped profile by name (``generic-scpi-analyzer``) or any profile file by path."""
    return parse_analyzer_profile(*profile_text(name_or_path))


def load_switch_profile(name_or_path: str | Path) -> SwitchProfile:
    """Load a shipped switch profile by name (``generic-scpi-switch``) or a file by path."""
    return parse_switch_profile(*profile_text(name_or_path))


def profile_kind(name_or_path: str | Path) -> str:
    """The ``profile.kind`` a profile declares (after ``based_on``), without validating the rest."""
    text, source = profile_text(name_or_path)
    head = with_base(load_toml(text, source), source).get("profile", {})
    return head.get("kind", "") if isinstance(head, dict) else ""
