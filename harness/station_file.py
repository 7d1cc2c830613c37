"""Station descriptions: the analyzer (and switch) of a bench, how they are reached, who
connects things, and what the station knows of its own uncertainty.

A station is the ``[station]`` table of a sequence, or a file of its own given with
``lineproof run --station FILE`` (the same keys at the top level), so one sequence can run on
several benches.  See DEVELOPERS.md, "Sequence files".
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

from lineproof.toml_problems import TableReader
from lineproof.uncertainty import UncertaintySettings

#: Who connects things to the analyzer's port.
CONNECTED_BY = ("switch", "operator", "simulated-operator")
#: A channel-list entry of SCPI-1999 Vol 1 §8.3.2 without the ``(@ )``: ``1!3`` or ``5``.
CHANNEL = re.compile(r"^[0-9]{1,4}(![0-9]{1,4}){0,2}$")


@dataclass(frozen=True)
class AnalyzerSpec:
    profile: str
    transport: str  # "visa" | "serial"
    resource: str | None  # None on a simulated bench: the bench gives it
    port: int = 1
    baud_rate: int | None = None


#: The switch's wiring tables besides ``wiring`` (to the station's analyzer port), for
#: two-port methods: what each name connects to port 2, between the ports (the thru; a
#: device slot with its output on port 2), and between the ports turned round (a device's
#: output on port 1: the reverse direction on a one-path analyzer).
PORT2_WIRING = "wiring_port2"
BETWEEN_WIRING = "wiring_between_ports"
REVERSED_WIRING = "wiring_between_ports_reversed"
WIRING_TABLES = ("wiring", PORT2_WIRING, BETWEEN_WIRING, REVERSED_WIRING)


@dataclass(frozen=True)
class SwitchSpec:
    profile: str
    resource: str | None
    #: object or slot name -> the channels to close to connect it to the analyzer's port
    wiring: Mapping[str, tuple[str, ...]]
    #: the other wiring tables by their key (see WIRING_TABLES), each name -> channels
    routes: Mapping[str, Mapping[str, tuple[str, ...]]] = field(default_factory=dict)

    def table(self, key: str) -> Mapping[str, tuple[str, ...]]:
        """A wiring table by its key (empty when the station has none)."""
        return self.wiring if key == "wiring" else self.routes.get(key, MappingProxyType({}))


@dataclass(frozen=True)
class StationSpec:
    name: str
    source: str
    analyzer: AnalyzerSpec
    connected_by: str
    simulated_bench: str | None = None
    switch: SwitchSpec | None = None
    #: The control channel of a simulated bench started elsewhere (``lineproof sim``):
    #: the station's resources are given, and a simulated operator connects through it.
    bench_control: str | None = None
    reference_plane: str = "analyzer test-port connector"
    #: What the station knows of its own uncertainty beyond the kit (repeatability, noise).
    uncertainty: UncertaintySettings = field(default_factory=UncertaintySettings)


def parse_station(table: TableReader, source: str) -> StationSpec | None:
    table.reject_unknown({"name", "simulated_bench", "bench_control", "connected_by", "reference_plane", "analyzer",
                          "switch", "uncertainty"})
    name = table.get("name", str, fix='add name = "which bench this is"')
    simulated = table.get("simulated_bench", str, None)
    control = table.get("bench_control", str, None)
    if control is not None and (simulated is not None or not re.fullmatch(r"(127\.0\.0\.1|localhost):[0-9]{1,5}", control)):
        table.problems.add(table.key("bench_control"), f"bench_control {control[:60]!r} is not usable here",
                           "give the 127.0.0.1:<port> that lineproof sim printed, without simulated_bench")
        control = None
    analyzer = _analyzer(table.table("analyzer", required=True), simulated is not None)
    switch = _switch(table.table("switch"), simulated is not None)
    default_hands = "switch" if table.has("switch") else "operator"
    connected_by = table.choice("connected_by", CONNECTED_BY, default_hands)
    reference_plane = table.get("reference_plane", str, "analyzer test-port connector")
    if connected_by == "switch" and not table.has("switch"):
        table.problems.add(table.key("connected_by"), "connected_by = \"switch\" but the station has no switch",
                           f"add a [{table.key('switch')}] table (profile, resource, wiring) or choose operator")
    if connected_by == "simulated-operator" and simulated is None and control is None:
        table.problems.add(table.key("connected_by"), "a simulated operator exists only on a simulated bench",
                           "set simulated_bench = \"<scenario>\" (or bench_control) or choose operator")
    uncertainty = _uncertainty(table.table("uncertainty"))
    if name is None or analyzer is None or connected_by is None or (table.has("switch") and switch is None):
        return None
    return StationSpec(name.strip(), source, analyzer, connected_by, simulated_bench=simulated, switch=switch,
                       bench_control=control, reference_plane=reference_plane or "",
                       uncertainty=uncertainty or UncertaintySettings())


def _uncertainty(table: TableReader | None) -> UncertaintySettings | None:
    """``[station.uncertainty]``: connector repeatability from a repeatability study (RMS |Γ| a
    reconnection adds at ``repeatability_reference_hz``), trace noise (None: from the data),
    the coverage factor (None: from the budget), the mismatch at each end of a switch path, and
    the analyzer's uncorrected port match as its data sheet states it (return loss in dB: what a
    thru-response calibration leaves)."""
    if table is None:
        return None
    table.reject_unknown({"connection_repeatability", "repeatability_reference_hz", "trace_noise", "coverage_factor",
                          "switch_path_mismatch", "raw_source_match_db", "raw_load_match_db"})
    repeatability = table.number("connection_repeatability", 0.0, minimum=0.0)
    reference = table.number("repeatability_reference_hz", 1e9, above=0.0)
    noise = table.number("trace_noise", None, minimum=0.0)
    coverage = table.number("coverage_factor", None, above=0.0)
    path = table.number("switch_path_mismatch", 0.0, minimum=0.0, fix="give |Γ| of a switch path's end, e.g. 0.001")
    raw = [table.number(key, None, above=0.0, fix="give the uncorrected match as a return loss in dB from the "
                        "analyzer's data sheet, e.g. 14") for key in ("raw_source_match_db", "raw_load_match_db")]
    if None in (repeatability, reference, path):
        return None
    source, load = (None if loss is None else 10 ** (-loss / 20) for loss in raw)
    return UncertaintySettings(repeatability, reference, noise, coverage, path, source, load)


def _analyzer(table: TableReader | None, simulated: bool) -> AnalyzerSpec | None:
    if table is None:
        return None
    table.reject_unknown({"profile", "transport", "resource", "port", "baud_rate"})
    profile = table.get("profile", str, fix='add profile = "generic-scpi-analyzer" (or a profile file)')
    transport = table.choice("transport", ("visa", "serial"), "visa")
    resource = table.get("resource", str, None)
    if resource is None and not simulated:
        table.problems.add(table.key("resource"), "missing key: a real station needs the analyzer's address",
                           'add resource = "TCPIP::<host>::<port>::SOCKET" (VISA) or a serial port such as "/dev/ttyUSB0"')
    port = table.get("port", int, 1)
    if isinstance(port, int) and not 1 <= port <= 4:
        table.problems.add(table.key("port"), f"port {port} is not 1..4", "give the analyzer port the device connects to")
        port = None
    baud = table.get("baud_rate", int, None)
    if baud is not None and transport != "serial":
        table.problems.add(table.key("baud_rate"), "baud_rate applies to a serial analyzer only",
                           'remove it or set transport = "serial"')
    if profile is None or transport is None or port is None:
        return None
    return AnalyzerSpec(profile, transport, resource, port, baud)


def _switch(table: TableReader | None, simulated: bool) -> SwitchSpec | None:
    if table is None:
        return None
    table.reject_unknown({"profile", "resource", *WIRING_TABLES})
    profile = table.get("profile", str, fix='add profile = "generic-scpi-switch"')
    resource = table.get("resource", str, None)
    if resource is None and not simulated:
        table.problems.add(table.key("resource"), "missing key: a real station needs the switch's address",
                           'add resource = "TCPIP::<host>::<port>::SOCKET"')
    wiring_table = table.table("wiring", required=True)
    wiring = _wiring(table, wiring_table)
    routes = {key: MappingProxyType(_wiring(table, table.table(key))) for key in WIRING_TABLES[1:] if table.has(key)}
    if profile is None or wiring_table is None:
        return None
    return SwitchSpec(profile, resource, MappingProxyType(wiring), MappingProxyType(routes))


def _wiring(table: TableReader, wiring_table: TableReader | None) -> dict[str, tuple[str, ...]]:
    wiring: dict[str, tuple[str, ...]] = {}
    for name, value in (wiring_table.data.items() if wiring_table else ()):
        key = wiring_table.key(_quoted(name))  # type: ignore[union-attr]
        channels = [value] if isinstance(value, str) else value
        if not isinstance(channels, list) or not channels or not all(isinstance(c, str) and CHANNEL.match(c) for c in channels):
            table.problems.add(key, f"must be a channel such as \"1!3\" or a list of them, got {value!r}"[:120],
                               "write the channels to close, e.g. [\"1!1\", \"2!1\"] (module!channel)")
            continue
        wiring[name] = tuple(channels)
    return wiring


def _quoted(name: str) -> str:
    return name if re.fullmatch(r"[A-Za-z0-9_-]+", name) else f'"{name}"'
