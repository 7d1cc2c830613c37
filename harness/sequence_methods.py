"""The calibration method a run uses, the figures it judges, and what a two-port method asks of
the station -- worked out before anything touches an instrument.

- :func:`resolve_method`: the method a sequence names, or -- ``method = "best"``, the default --
  the best the analyzer's profile allows that the kit and the station can carry out (SOLT,
  then one-path, then one-port), with the reason; ``lineproof check`` and the run both say it.
- :func:`judged_figures`: the figures the verdicts are on (``[measurement] judge``, or the
  default of :mod:`lineproof.figures` for the method).
- :func:`check_two_port`: the problems of a two-port method: the analyzer's paths and
  parameters, port 1 as the device's input, the switch routes it needs (port 2's standards,
  the thru, each device slot between the ports, turned round for one-path, on port 1 when the
  as-terminated figure is measured), and the figures against the bands' limits.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass

from lineproof import figures
from lineproof.calibration import METHOD_NAMES, METHODS_BY_PATHS
from lineproof.calkit import CalKit, load_kit
from lineproof.errors import InputError
from lineproof.sequence import AUTOMATIC_METHOD, SequenceSpec, resolve_path
from lineproof.station_file import BETWEEN_WIRING, PORT2_WIRING, REVERSED_WIRING
from lineproof.toml_problems import Problems

#: Methods a run carries out, best first; thru response corrects transmission only, and a run
#: judges reflection.
RUN_METHODS = ("solt", "one-path", "one-port")
TWO_PORT_METHODS = ("solt", "one-path")
#: Parameters each method sweeps.
METHOD_PARAMETERS = {"one-port": ("S11",), "one-path": ("S11", "S21"), "solt": ("S11", "S21", "S12", "S22")}


@dataclass(frozen=True)
class Route:
    """A connection a switch station must be wired for: the table, the name, what it is."""

    table: str
    name: str
    what: str


def judged_figures(spec: SequenceSpec) -> tuple[str, ...]:
    """The figures the verdicts are on."""
    if spec.measurement.judge is not None:
        return spec.measurement.judge
    method = spec.calibration.method if spec.calibration else "one-port"
    return figures.DEFAULT_JUDGED_TWO_PORT if method in TWO_PORT_METHODS else figures.DEFAULT_JUDGED_ONE_PORT


def _kit(spec: SequenceSpec) -> CalKit | None:
    path = resolve_path(spec.calibration.kit, spec) if spec.calibration else None
    if path is None:
        return None
    try:
        return load_kit(path)
    except InputError:
        return None  # reported by the calibration check


def routes_needed(spec: SequenceSpec, method: str, kit: CalKit | None) -> list[Route]:
    """The switch routes ``method`` needs for its standards and devices."""
    needed = []
    if kit is not None and spec.has_step("calibrate"):
        needed += [Route("wiring", kit.standard(kind).name, f"the {kind} standard at port 1")
                   for kind in ("open", "short", "load") if kit.has(kind)]
    if method not in TWO_PORT_METHODS:
        units = spec.devices.units if spec.devices is not None and spec.has_step("measure-batch") else ()
        return needed + [Route("wiring", u.slot, f"{u.serial} on port 1") for u in units if u.slot is not None]
    if kit is not None and spec.has_step("calibrate"):
        if method == "solt":
            needed += [Route(PORT2_WIRING, kit.standard(kind).name, f"the {kind} standard at port 2")
                       for kind in ("open", "short", "load") if kit.has(kind)]
        if kit.has("thru"):
            needed.append(Route(BETWEEN_WIRING, kit.standard("thru").name, "the thru between the ports"))
    if spec.has_step("measure-batch") and spec.devices is not None:
        for unit in spec.devices.units:
            if unit.slot is None:
                continue
            needed.append(Route(BETWEEN_WIRING, unit.slot, f"{unit.serial} between the ports"))
            if method == "one-path":
                needed.append(Route(REVERSED_WIRING, unit.slot, f"{unit.serial} turned round (its output on port 1)"))
            if spec.measurement.as_terminated == "measured":
                needed.append(Route("wiring", unit.slot, f"{unit.serial} with its output on the termination"))
    return needed


def missing_routes(spec: SequenceSpec, method: str, kit: CalKit | None) -> list[Route]:
    """The routes of :func:`routes_needed` a switch station is not wired for (none when
    someone connects things by hand)."""
    switch = spec.station.switch
    if switch is None or spec.station.connected_by != "switch":
        return []
    return [route for route in routes_needed(spec, method, kit) if route.name not in switch.table(route.table)]


def _allowed(paths: str) -> list[str]:
    long_names = METHODS_BY_PATHS.get(paths, ())
    return [short for short in RUN_METHODS if METHOD_NAMES[short] in long_names]


def resolve_method(spec: SequenceSpec, paths: str | None) -> tuple[SequenceSpec, str | None]:
    """``spec`` with its calibration method made concrete, and why the harness chose it (None
    when the sequence named it, or when the analyzer's paths are not known)."""
    cal = spec.calibration
    if cal is None or cal.method != AUTOMATIC_METHOD or paths is None:
        return spec, None
    kit = _kit(spec)
    kinds = {standard.kind for standard in kit.standards.values()} if kit is not None else set()
    passed_over = []
    for method in _allowed(paths):
        needs = {"one-port": {"open", "short", "load"}}.get(method, {"open", "short", "load", "thru"})
        missing = missing_routes(spec, method, kit)
        if kit is not None and needs <= kinds and not missing:
            why = f"the best the analyzer ({paths} paths) allows"
            if passed_over:
                why += f" that this station can do ({'; '.join(passed_over)})"
            return dataclasses.replace(spec, calibration=dataclasses.replace(cal, method=method, chosen=why)), why
        passed_over.append(f"{method}: " + (f"the kit lacks {', '.join(sorted(needs - kinds))}" if not needs <= kinds
                                            else f"the switch has no route for {missing[0].what}"))
    allowed = _allowed(paths)
    if not allowed:
        return spec, None
    # nothing this station can do: the best the analyzer allows, whose problems the check lists
    why = f"the best the analyzer ({paths} paths) allows; this station cannot do any method as wired"
    return dataclasses.replace(spec, calibration=dataclasses.replace(cal, method=allowed[0], chosen=why)), why


def check_two_port(spec: SequenceSpec, problems: Problems, capabilities: object | None) -> None:
    """Every problem of the sequence's method and figures that a two-port run would meet."""
    cal = spec.calibration
    method = cal.method if cal is not None else "one-port"
    if method == "thru-response":
        problems.add("calibration.method", "a thru-response calibration corrects transmission only, and a run judges "
                     "the devices' match", 'use method = "solt" or "one-path" (or "one-port")')
        return
    if method in TWO_PORT_METHODS:
        _check_analyzer(spec, problems, method, capabilities)
        _check_routes(spec, problems, method)
    _check_figures(spec, problems, method)


def _check_analyzer(spec: SequenceSpec, problems: Problems, method: str, capabilities: object | None) -> None:
    if spec.station.analyzer.port != 1:
        key = "station.analyzer.port" if spec.station.source == spec.source else "analyzer.port"
        problems.add(key, f"a {method} run measures each device from port 1 (its input) to port 2 (its output)",
                     "set port = 1", source=spec.station.source)
    if method not in _allowed(str(getattr(capabilities, "paths", ""))):
        return  # the calibration check said the analyzer cannot do it
    parameters = set(getattr(capabilities, "parameters", ()) or ())
    lacking = [p for p in METHOD_PARAMETERS[method] if parameters and p not in parameters]
    if lacking:
        problems.add("calibration.method", f"a {method} calibration sweeps {', '.join(METHOD_PARAMETERS[method])}, "
                     f"but the analyzer's profile does not measure {', '.join(lacking)}",
                     "choose a method the analyzer can do, or correct the profile's parameters")


def _check_routes(spec: SequenceSpec, problems: Problems, method: str) -> None:
    station = spec.station
    prefix = "station.switch" if station.source == spec.source else "switch"
    for route in missing_routes(spec, method, _kit(spec)):
        fix = f"add {route.name} = \"<channel>\" to [{prefix}.{route.table}]"
        if route.table == REVERSED_WIRING:
            fix += ", or let a person turn the devices round (connected_by = \"operator\"), or use method = \"solt\""
        problems.add(f"{prefix}.{route.table}", f"the switch has no route for {route.what} ({route.name!r}), "
                     f"which a {method} run needs", fix, source=station.source)


def _check_figures(spec: SequenceSpec, problems: Problems, method: str) -> None:
    judged = judged_figures(spec)
    two_port_only = [name for name in judged if name != figures.AS_TERMINATED]
    if method not in TWO_PORT_METHODS and two_port_only:
        problems.add("measurement.judge", f"{', '.join(two_port_only)} need(s) full S-parameters, and a "
                     f"{method} calibration measures reflection only",
                     'calibrate with method = "solt" or "one-path", or judge "as-terminated" alone')
        return
    if not spec.has_step("measure-batch"):
        return
    _check_limits(spec.bands, judged, problems, spec.measurement.judge is not None)


def _check_limits(bands: Sequence, judged: Sequence[str], problems: Problems, stated: bool) -> None:
    where = "measurement.judge" if stated else "band"
    for name in judged:
        if not any(figures.figure_limit(name, band) is not None for band in bands) and (stated or name not in (
                figures.INSERTION_LOSS,)):
            limit = "max_insertion_loss_db" if name == figures.INSERTION_LOSS else "max_vswr or min_return_loss_db"
            problems.add(where, f"{name} is judged, but no band sets a limit for it ({limit})",
                         f"add {limit} to the bands it applies to, or stop judging it")
    for index, band in enumerate(bands, 1):
        if not any(figures.figure_limit(name, band) is not None for name in judged):
            problems.add(f"band[{index}]", f"band {band.name} limits none of the judged figures ({', '.join(judged)})",
                         "give it a limit for one of them, or judge another figure ([measurement] judge)")
