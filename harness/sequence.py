"""Sequence files: what a run does, on which station, against which limits.

A sequence is a TOML file with key names of our own (documented in DEVELOPERS.md, "Sequence
files").  :func:`load_sequence` reads it, checks every key and every cross-reference (the
analyzer's range and points, the calibration method against what the analyzer can do, the
kit, the check standard's reference, the objects a simulated bench offers, the switch wiring)
and either returns a frozen :class:`SequenceSpec` or raises :class:`SequenceProblems` listing
*every* problem with file, key, line and fix.  It touches no instrument.  Nothing in a
sequence is evaluated as code: values are strings, numbers and names compared with known sets.
"""

from __future__ import annotations

import hashlib
import math
import re
from dataclasses import dataclass
from pathlib import Path

from lineproof.check_standards import CheckStandardSpec, parse_check_standard
from lineproof.errors import InputError
from lineproof.gauge_study import StudySpec, parse_study
from lineproof.station_file import StationSpec, parse_station
from lineproof.toml_problems import KeyLines, Problems, TableReader, parse_toml
from lineproof.touchstone import SERIAL_RULE, serial_problem
from lineproof.values import BandLimit, SweepPlan

#: Actions a ``[[step]]`` may ``do``.
ACTIONS = ("identify", "calibrate", "qualify-termination", "verify", "measure-batch", "repeatability-study",
           "message", "route")
#: How the serial numbers of a batch are known.
DEVICE_ENTRY = ("listed", "scanned")
DECISION_RULES = ("simple", "guard-banded")
#: Band names become metadata keys and column values.
BAND_NAME = re.compile(r"^[a-z0-9][a-z0-9_-]{0,31}$")
#: Names of bench objects, switch positions and slots: printable, no path characters.
OBJECT_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9 ._:+-]{0,63}$")


class SequenceProblems(InputError):
    """A sequence (and the files it names) has one or more problems; ``problems`` lists each."""

    def __init__(self, problems: list[InputError], source: str) -> None:
        count = len(problems)
        super().__init__(f"{count} problem{'s' if count != 1 else ''} found:\n"
                         + "\n".join(f"  {p}" for p in problems), path=source)
        self.problems = problems

    def __str__(self) -> str:
        return self.message


#: ``[calibration] reuse``: the newest stored calibration that fits, or one by its id.
REUSE = re.compile(r"^(latest|cal-[0-9]{8}T[0-9]{6}Z-[0-9a-f]{6})$")
REUSE_FIX = 'write reuse = "latest" or a calibration id as lineproof printed it (cal-20260101T120000Z-1a2b3c)'

#: ``[calibration] method`` when the sequence leaves the choice to the harness: the best
#: method the analyzer allows and the station can carry out (:mod:`lineproof.sequence_methods`).
AUTOMATIC_METHOD = "best"


@dataclass(frozen=True)
class CalibrationSpec:
    method: str  # a short name of calibration.METHOD_NAMES, or AUTOMATIC_METHOD
    kit: str  # as written; resolved by :func:`resolve_path`
    valid_for_s: float
    #: Why lineproof chose ``method`` when the sequence left the choice to it ("" if it did not).
    chosen: str = ""
    #: The calibration holds while the analyzer's temperature stays within this of the
    #: temperature it was made at (None: not checked).
    max_temperature_change_k: float | None = 1.0
    #: A stored calibration the calibrate step loads instead of measuring the standards:
    #: "latest" (the newest of this station, analyzer and method) or a calibration id; None:
    #: measure them (see :mod:`lineproof.calibration_reuse`).
    reuse: str | None = None
    #: The largest error interpolating a reused calibration onto this sweep may add to a
    #: corrected result (|Γ|, or relative |S21|).
    max_interpolation_error: float = 1e-3


@dataclass(frozen=True)
class MeasurementSpec:
    """``[measurement]``: the figures the verdicts are on (None: the default for the method,
    see :mod:`lineproof.figures`), how a two-port run finds the as-terminated figure, and --
    for a thru-response run, which measures no reflection -- the devices' specified match
    within the bands (VSWR at either port; None: bounded by their own transmission, see
    :mod:`lineproof.normalization`)."""

    judge: tuple[str, ...] | None = None
    as_terminated: str = "computed"
    device_max_vswr: float | None = None


@dataclass(frozen=True)
class MarkerSpec:
    """``[[marker]]``: a named frequency each device is read at (the nearest sweep point)."""

    name: str
    frequency_hz: float
    key: str = ""  # where it is written, for messages


@dataclass(frozen=True)
class TerminationSpec:
    name: str
    max_vswr: float


@dataclass(frozen=True)
class DeviceUnit:
    serial: str
    model: str
    slot: str | None = None
    key: str = ""  # where it is written, for messages


@dataclass(frozen=True)
class DevicesSpec:
    model: str
    entry: str  # "listed" | "scanned"
    units: tuple[DeviceUnit, ...] = ()
    max_count: int | None = None


@dataclass(frozen=True)
class ReverifySpec:
    every_devices: int | None = None
    every_minutes: float | None = None
    at_end: bool = False

    @property
    def any(self) -> bool:
        return self.every_devices is not None or self.every_minutes is not None or self.at_end


@dataclass(frozen=True)
class StepSpec:
    action: str
    text: str = ""
    target: str | None = None
    key: str = ""  # where it is written, for messages


@dataclass(frozen=True, eq=False)
class SequenceSpec:
    """A validated sequence: everything a run needs, with the text it came from."""

    name: str
    source: str
    text: str
    sha256: str
    station: StationSpec
    plan: SweepPlan
    allow_segments: bool
    bands: tuple[BandLimit, ...]
    calibration: CalibrationSpec | None
    termination: TerminationSpec | None
    check_standard: CheckStandardSpec | None
    devices: DevicesSpec | None
    decision_rule: str
    reverify: ReverifySpec
    steps: tuple[StepSpec, ...]
    records_folder: str | None = None
    database: str | None = None
    notes: str = ""
    study: StudySpec | None = None
    measurement: MeasurementSpec = MeasurementSpec()
    markers: tuple[MarkerSpec, ...] = ()

    @property
    def folder(self) -> Path:
        return Path(self.source).parent

    @property
    def marker_frequencies(self) -> dict[str, float]:
        """The markers by name, as the steps read them."""
        return {marker.name: marker.frequency_hz for marker in self.markers}

    def has_step(self, action: str) -> bool:
        return any(step.action == action for step in self.steps)


# -- reading ------------------------------------------------------------------------------------


def read_text(path: Path) -> str:
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read the file ({exc.strerror})", path=str(path),
                         fix="give the path of a sequence .toml file") from exc
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte {exc.start})", path=str(path),
                         fix="save the sequence as UTF-8 text") from exc


def parse_sequence(text: str, source: str, station_text: tuple[str, str] | None = None) -> tuple[SequenceSpec | None, Problems]:
    """Structure and types only (no other file opened); see :func:`load_sequence`."""
    problems = Problems(source, KeyLines(text))
    data = parse_toml(text, source, problems)
    if data is None:
        return None, problems
    root = TableReader(data, "", problems)
    root.reject_unknown({"sequence", "station", "sweep", "band", "calibration", "termination",
                         "check_standard", "devices", "decision", "reverify", "step", "records", "study",
                         "measurement", "marker"})
    head = root.table("sequence", required=True)
    name, notes = None, ""
    if head is not None:
        head.reject_unknown({"name", "notes"})
        name = head.get("name", str, fix='add name = "what this sequence is for"')
        notes = head.get("notes", str, "") or ""
    station = _station_from(root, station_text, problems)
    plan, allow_segments = _sweep(root.table("sweep", required=True))
    bands = _bands(root, problems)
    records = _records(root.table("records"))
    spec = SequenceSpec(
        name=(name or "").strip(),
        source=source,
        text=text,
        sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
        station=station,  # type: ignore[arg-type]
        plan=plan,  # type: ignore[arg-type]
        allow_segments=allow_segments,
        bands=bands,
        calibration=_calibration(root.table("calibration")),
        termination=_termination(root.table("termination")),
        check_standard=parse_check_standard(root.table("check_standard"), _object_name),
        devices=_devices(root.table("devices"), problems),
        decision_rule=_decision(root.table("decision")),
        reverify=_reverify(root.table("reverify")),
        steps=_steps(root, problems),
        records_folder=records[0],
        database=records[1],
        notes=notes,
        study=parse_study(root.table("study")),
        measurement=_measurement(root.table("measurement")),
        markers=_markers(root, plan, problems),
    )
    if problems or station is None or plan is None:
        return None, problems
    return spec, problems


def _station_from(root: TableReader, station_text: tuple[str, str] | None, problems: Problems) -> StationSpec | None:
    if station_text is not None:
        # --station FILE replaces the sequence's own [station] table.
        text, source = station_text
        own = Problems(source, KeyLines(text))
        data = parse_toml(text, source, own)
        spec = None if data is None else parse_station(TableReader(data, "", own), source)
        problems.items.extend(own.items)
        problems.read_with(source, own.lines)  # the cross-checks' problems in it get lines too
        return spec
    table = root.table("station")
    if table is None:
        problems.add("station", "no station: the sequence does not say where it runs",
                     "add a [station] table or pass --station FILE")
        return None
    return parse_station(table, problems.source)


def _sweep(table: TableReader | None) -> tuple[SweepPlan | None, bool]:
    if table is None:
        return None, False
    table.reject_unknown({"start_hz", "stop_hz", "points", "if_bandwidth_hz", "power_dbm", "allow_segments"})
    start = table.number("start_hz", above=0.0)
    stop = table.number("stop_hz", above=0.0)
    points = table.get("points", int)
    bandwidth = table.number("if_bandwidth_hz", 1000.0, above=0.0)
    power = table.number("power_dbm", None)
    allow_segments = bool(table.get("allow_segments", bool, False))
    if points is not None and points < 2:
        table.problems.add(table.key("points"), f"a sweep needs at least 2 points, got {points}", "give points >= 2")
        points = None
    if start is not None and stop is not None and stop <= start:
        table.problems.add(table.key("stop_hz"), f"stop ({stop:g} Hz) must be above start ({start:g} Hz)",
                           "swap them or widen the sweep")
        return None, allow_segments
    if None in (start, stop, points, bandwidth):
        return None, allow_segments
    return SweepPlan(start, stop, points, bandwidth, power), allow_segments


def _bands(root: TableReader, problems: Problems) -> tuple[BandLimit, ...]:
    tables = root.tables("band")
    if not tables and not problems.items:
        problems.add("band", "no [[band]] table: nothing to judge the devices against",
                     'add [[band]] with name, start_hz, stop_hz and max_vswr')
    bands, seen = [], set()
    for table in tables:
        table.reject_unknown({"name", "start_hz", "stop_hz", "max_vswr", "min_return_loss_db", "max_insertion_loss_db"})
        name = table.get("name", str)
        start, stop = table.number("start_hz", above=0.0), table.number("stop_hz", above=0.0)
        limits = _band_limits(table)
        if name is not None and not BAND_NAME.match(name):
            problems.add(table.key("name"), f"band name {name!r} is not allowed",
                         "use 1-32 lower-case letters, digits, '_' or '-', e.g. \"70cm\"")
            name = None
        elif name in seen:
            problems.add(table.key("name"), f"band {name!r} is defined twice", "give each band its own name")
            name = None
        if start is not None and stop is not None and stop < start:
            problems.add(table.key("stop_hz"), "band stop is below its start", "swap start_hz and stop_hz")
            continue
        if None not in (name, start, stop, limits):
            seen.add(name)
            bands.append(BandLimit(name, start, stop, *limits))  # type: ignore[misc]
    return tuple(bands)


def _band_limits(table: TableReader) -> tuple[float, float | None, float | None] | None:
    """(max VSWR -- inf when the band sets no VSWR limit --, min return loss, max insertion loss)."""
    vswr = table.number("max_vswr", None, above=1.0, fix="a VSWR limit is a ratio above 1, e.g. 1.2")
    return_loss = table.number("min_return_loss_db", None, above=0.0, fix="a return-loss limit in dB, e.g. 20")
    loss = table.number("max_insertion_loss_db", None, above=0.0, fix="an insertion-loss limit in dB, e.g. 0.3")
    given = [key for key in ("max_vswr", "min_return_loss_db", "max_insertion_loss_db") if table.has(key)]
    if not given:
        table.problems.add(table.key("max_vswr"), "the band has no limit",
                           "add max_vswr (and/or min_return_loss_db, max_insertion_loss_db)")
        return None
    values = {"max_vswr": vswr, "min_return_loss_db": return_loss, "max_insertion_loss_db": loss}
    if any(values[key] is None for key in given):
        return None  # a given limit was refused above
    return (math.inf if vswr is None else vswr), return_loss, loss


def _markers(root: TableReader, plan: SweepPlan | None, problems: Problems) -> tuple[MarkerSpec, ...]:
    """``[[marker]]`` tables: a name (it becomes a metadata key) and a frequency in the sweep."""
    markers: list[MarkerSpec] = []
    for table in root.tables("marker"):
        table.reject_unknown({"name", "frequency_hz"})
        name = table.get("name", str, fix='add name = "f0" (lower case, as band names)')
        hz = table.number("frequency_hz", above=0.0, fix="give the marker's frequency in Hz, e.g. 146e6")
        if name is not None and not BAND_NAME.match(name):
            problems.add(table.key("name"), f"marker name {name!r} is not allowed",
                         'use 1-32 lower-case letters, digits, \'_\' or \'-\', e.g. "f0"')
            name = None
        elif name is not None and any(m.name == name for m in markers):
            problems.add(table.key("name"), f"marker {name!r} is defined twice", "give each marker its own name")
            name = None
        if hz is not None and plan is not None and not plan.start_hz <= hz <= plan.stop_hz:
            problems.add(table.key("frequency_hz"), f"marker at {hz / 1e6:g} MHz lies outside the sweep "
                         f"({plan.describe()})", "move it into the sweep, or widen [sweep]")
            hz = None
        if name is not None and hz is not None:
            markers.append(MarkerSpec(name, hz, table.key("name")))
    return tuple(markers)


def _calibration(table: TableReader | None) -> CalibrationSpec | None:
    if table is None:
        return None
    from lineproof.calibration import METHOD_NAMES

    table.reject_unknown({"method", "kit", "valid_for_minutes", "max_temperature_change_k", "reuse",
                          "max_interpolation_error"})
    method = table.choice("method", [*METHOD_NAMES, AUTOMATIC_METHOD], AUTOMATIC_METHOD)
    kit = table.get("kit", str, fix='add kit = "kits/n50-illustrative.toml" (or your kit file)')
    minutes = table.number("valid_for_minutes", 480.0, above=0.0)
    # Common practice (from memory): analyzers state their corrected performance within
    # +-1 K of the temperature the calibration was made at.
    kelvin = table.number("max_temperature_change_k", 1.0, above=0.0,
                          fix="give the largest temperature change a calibration survives, e.g. 1.0")
    reuse = table.get("reuse", str, None, fix=REUSE_FIX)
    if reuse is not None and not REUSE.match(reuse):
        table.problems.add(table.key("reuse"), f"{reuse[:60]!r} names no stored calibration", REUSE_FIX)
        reuse = None
    tolerance = table.number("max_interpolation_error", 1e-3, above=0.0,
                             fix="give the largest error interpolation may add, e.g. 1e-3 (|reflection|)")
    if None in (method, kit, minutes, kelvin, tolerance):
        return None
    return CalibrationSpec(method, kit, minutes * 60.0, max_temperature_change_k=kelvin, reuse=reuse,
                           max_interpolation_error=tolerance)


def _termination(table: TableReader | None) -> TerminationSpec | None:
    if table is None:
        return None
    table.reject_unknown({"name", "max_vswr"})
    name = _object_name(table, "name")
    # Common practice, no published source: a termination for a DUT's output is 1.05:1 or better.
    limit = table.number("max_vswr", 1.05, above=1.0, fix="a VSWR limit is a ratio above 1, e.g. 1.05")
    return None if None in (name, limit) else TerminationSpec(name, limit)


def _object_name(table: TableReader, key: str) -> str | None:
    name = table.get(key, str)
    if name is not None and not OBJECT_NAME.match(name):
        table.problems.add(table.key(key), f"name {name[:40]!r} is not allowed",
                           "use 1-64 letters, digits, spaces, '.', '_', ':', '+' or '-'")
        return None
    return name


def _devices(table: TableReader | None, problems: Problems) -> DevicesSpec | None:
    if table is None:
        return None
    table.reject_unknown({"model", "entry", "serials", "unit", "max_count"})
    model = table.get("model", str, fix='add model = "what the devices are"')
    entry = table.choice("entry", DEVICE_ENTRY, "listed")
    units: list[DeviceUnit] = []
    for index, serial in enumerate(table.get("serials", list, []) or [], 1):
        if _serial_ok(serial, f"{table.key('serials')}[{index}]", problems):
            units.append(DeviceUnit(serial, model or "", None, f"{table.key('serials')}[{index}]"))
    for unit in table.tables("unit"):
        unit.reject_unknown({"serial", "model", "slot"})
        serial = unit.get("serial", str)
        slot = unit.get("slot", str, None)
        unit_model = unit.get("model", str, model or "")
        if serial is not None and _serial_ok(serial, unit.key("serial"), problems):
            units.append(DeviceUnit(serial, unit_model or "", slot, unit.key("serial")))
    max_count = table.get("max_count", int, None)
    if max_count is not None and max_count < 1:
        problems.add(table.key("max_count"), "must be at least 1", "give the largest batch size, or remove it")
    seen: set[str] = set()
    for unit in units:
        if unit.serial.lower() in seen:
            problems.add(unit.key, f"serial {unit.serial!r} is listed twice (serials are compared ignoring case, "
                         "as file names are on some systems)", "list each device once")
        seen.add(unit.serial.lower())
    if entry == "listed" and not units:
        problems.add(table.key("serials"), "no devices listed", 'add serials = ["...", ...] or [[devices.unit]] tables,'
                     ' or set entry = "scanned" to enter serials at the bench')
    if entry == "scanned" and units:
        problems.add(table.key("entry"), "serials are listed, but entry = \"scanned\" asks for them at the bench",
                     'remove the list or set entry = "listed"')
    if model is None or entry is None:
        return None
    return DevicesSpec(model, entry, tuple(units), max_count)


def _serial_ok(serial: object, key: str, problems: Problems) -> bool:
    problem = serial_problem(serial)
    if problem is not None:
        problems.add(key, problem, SERIAL_RULE)
        return False
    return True


def _decision(table: TableReader | None) -> str:
    if table is None:
        return "simple"
    table.reject_unknown({"rule"})
    return table.choice("rule", DECISION_RULES, "simple") or "simple"


def _reverify(table: TableReader | None) -> ReverifySpec:
    if table is None:
        return ReverifySpec()
    table.reject_unknown({"every_devices", "every_minutes", "at_end"})
    every = table.get("every_devices", int, None)
    if every is not None and every < 1:
        table.problems.add(table.key("every_devices"), "must be at least 1", "give how many devices between checks")
        every = None
    minutes = table.number("every_minutes", None, above=0.0)
    return ReverifySpec(every, minutes, bool(table.get("at_end", bool, False)))


def _steps(root: TableReader, problems: Problems) -> tuple[StepSpec, ...]:
    tables = root.tables("step")
    if not tables:
        problems.add("step", "no [[step]] tables: the sequence does nothing",
                     'add [[step]] tables, e.g. do = "calibrate", "qualify-termination", "verify", "measure-batch"')
    steps = []
    for table in tables:
        table.reject_unknown({"do", "text", "to"})
        action = table.choice("do", ACTIONS)
        text = table.get("text", str, "") or ""
        target = table.get("to", str, None)
        if action == "message" and not text.strip():
            problems.add(table.key("text"), "a message step needs its text", 'add text = "what the operator should do"')
        if action == "route" and target is None:
            problems.add(table.key("to"), "a route step needs a target", 'add to = "<object or slot name>"')
        if action is not None:
            steps.append(StepSpec(action, text, target, table.key("do")))
    return tuple(steps)


def _measurement(table: TableReader | None) -> MeasurementSpec:
    if table is None:
        return MeasurementSpec()
    from lineproof.figures import AS_TERMINATED_WAYS, FIGURES

    table.reject_unknown({"judge", "as_terminated", "device_max_vswr"})
    names = table.get("judge", list, None)
    judged = None
    if names is not None:
        wrong = [n for n in names if n not in FIGURES]
        if wrong or not names or len(set(names)) != len(names):
            table.problems.add(table.key("judge"), f"must list figures once each from {', '.join(FIGURES)}, got "
                               f"{names!r}"[:200], f'e.g. judge = ["{FIGURES[0]}", "{FIGURES[-1]}"]')
        else:
            judged = tuple(names)
    way = table.choice("as_terminated", AS_TERMINATED_WAYS, "computed") or "computed"
    device_vswr = table.number("device_max_vswr", None, above=1.0,
                               fix="give the devices' specified VSWR at either port, e.g. 1.25, or remove it")
    return MeasurementSpec(judged, way, device_vswr)


def _records(table: TableReader | None) -> tuple[str | None, str | None]:
    if table is None:
        return None, None
    table.reject_unknown({"folder", "database"})
    return table.get("folder", str, None), table.get("database", str, None)


def load_sequence(path: str | Path, station_file: str | Path | None = None) -> SequenceSpec:
    """Read and fully check a sequence (and the station file that replaces its [station]).

    Raises :class:`SequenceProblems` with every problem found; touches no instrument.
    """
    path = Path(path)
    station_text = None
    if station_file is not None:
        station_text = (read_text(Path(station_file)), str(station_file))
    return check_sequence_text(read_text(path), str(path), station_text)


def check_sequence_text(text: str, source: str, station_text: tuple[str, str] | None = None) -> SequenceSpec:
    """:func:`load_sequence` on text already read (``source`` names it and anchors its
    relative paths): a resumed run checks the copy it kept against its original folder."""
    from lineproof.sequence_checks import check_references

    spec, problems = parse_sequence(text, source, station_text)
    if spec is not None:
        spec = check_references(spec, problems)
    if problems:
        raise SequenceProblems(problems.items, source)
    assert spec is not None
    return spec


def resolve_path(written: str, spec: SequenceSpec) -> Path | None:
    """A file named in a sequence: relative to the sequence's folder, else as given, else a
    file shipped with lineproof (``kits/n50-illustrative.toml``); None if none exists."""
    from importlib import resources

    candidate = Path(written)
    if not candidate.is_absolute() and (spec.folder / candidate).is_file():
        return spec.folder / candidate
    if candidate.is_file():
        return candidate
    shipped = resources.files("lineproof.sequences") / written
    return Path(str(shipped)) if shipped.is_file() else None


def profile_argument(station_source: str, written: str) -> str:
    """An instrument profile named in a station: a file beside the station (or sequence)
    file, else in the current folder, else one shipped in ``sequences/`` (``profiles/...``),
    else as written (a shipped profile's name)."""
    from importlib import resources

    if not written.endswith(".toml"):
        return written
    local = Path(station_source).parent / written
    if local.is_file():
        return str(local)
    if Path(written).is_file():
        return written
    shipped = resources.files("lineproof.sequences") / written
    return str(shipped) if shipped.is_file() else written
