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
import math
from collections.abc import Sequence
from dataclasses import dataclass

from lineproof import figures
from lineproof.calibration import METHOD_NAMES, METHODS_BY_PATHS
from lineproof.calkit import CalKit, load_kit
from lineproof.errors import InputError
from lineproof.sequence import AUTOMATIC_METHOD, SequenceSpec, resolve_path
from lineproof.station_file import BETWEEN_WIRING, PORT2_WIRING, REVERSED_WIRING
from lineproof.toml_problems import Problems

#: Methods a run carries out, best first.  Thru response corrects transmission only: it is
#: chosen only for a transmission-only check (insertion loss judged alone), and one-port,
#: which measures no transmission, is never chosen for one.
RUN_METHODS = ("solt", "one-path", "thru-response", "one-port")
TWO_PORT_METHODS = ("solt", "one-path")
THRU_RESPONSE = "thru-response"
#: Methods that measure each device between the ports.
TRANSMISSION_METHODS = (*TWO_PORT_METHODS, THRU_RESPONSE)
#: Parameters each method sweeps.
METHOD_PARAMETERS = {"one-port": ("S11",), "one-path": ("S11", "S21"), "solt": ("S11", "S21", "S12", "S22"),
                     THRU_RESPONSE: ("S21",)}
#: Standards each method measures.
METHOD_KINDS = {"one-port": {"open", "short", "load"}, THRU_RESPONSE: {"thru"}}


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
    if method == THRU_RESPONSE:
        return (figures.INSERTION_LOSS,)
    return figures.DEFAULT_JUDGED_TWO_PORT if method in TWO_PORT_METHODS else figures.DEFAULT_JUDGED_ONE_PORT


def needs_termination(spec: SequenceSpec) -> bool:
    """Whether the batch needs a qualified termination: a one-port run measures each device on
    it; a two-port run when the as-terminated figure is judged or measured; a thru response
    never (the devices' outputs go to port 2)."""
    method = spec.calibration.method if spec.calibration else "one-port"
    if method == THRU_RESPONSE:
        return False
    if method not in TRANSMISSION_METHODS:
        return True
    return figures.AS_TERMINATED in judged_figures(spec) or spec.measurement.as_terminated == "measured"


def transmission_only(spec: SequenceSpec) -> bool:
    """Whether the sequence judges insertion loss alone and reads no reflection (qualifies no
    termination, verifies with no check standard): a thru response can serve it."""
    reflecting = any(spec.has_step(action) for action in ("qualify-termination", "verify", "repeatability-study"))
    return spec.measurement.judge == (figures.INSERTION_LOSS,) and not reflecting and not spec.reverify.any


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
    if kit is not None and spec.has_step("calibrate") and method != THRU_RESPONSE:
        needed += [Route("wiring", kit.standard(kind).name, f"the {kind} standard at port 1")
                   for kind in ("open", "short", "load") if kit.has(kind)]
    if method not in TRANSMISSION_METHODS:
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
            if spec.measurement.as_terminated == "measured" and method in TWO_PORT_METHODS:
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


def candidates(spec: SequenceSpec, paths: str) -> list[str]:
    """The methods ``method = "best"`` considers, best first: a transmission-only check (see
    :func:`transmission_only`) may fall back on a thru response (never on one-port); any other
    on one-port (never on a thru response, which measures no reflection)."""
    unfit = "one-port" if transmission_only(spec) else THRU_RESPONSE
    fit = [method for method in _allowed(paths) if method != unfit]
    return fit or _allowed(paths)  # a reflectometer: one-port, whose figures the check then refuses


def resolve_method(spec: SequenceSpec, paths: str | None) -> tuple[SequenceSpec, str | None]:
    """``spec`` with its calibration method made concrete, and why the harness chose it (None
    when the sequence named it, or when the analyzer's paths are not known)."""
    cal = spec.calibration
    if cal is None or cal.method != AUTOMATIC_METHOD or paths is None:
        return spec, None
    kit = _kit(spec)
    kinds = {standard.kind for standard in kit.standards.values()} if kit is not None else set()
    passed_over = []
    for method in candidates(spec, paths):
        needs = METHOD_KINDS.get(method, {"open", "short", "load", "thru"})
        missing = missing_routes(spec, method, kit)
        if kit is not None and needs <= kinds and not missing:
            why = f"the best the analyzer ({paths} paths) allows"
            if passed_over:
                why += f" that this station can do ({'; '.join(passed_over)})"
            return dataclasses.replace(spec, calibration=dataclasses.replace(cal, method=method, chosen=why)), why
        passed_over.append(f"{method}: " + (f"the kit lacks {', '.join(sorted(needs - kinds))}" if not needs <= kinds
                                            else f"the switch has no route for {missing[0].what}"))
    allowed = candidates(spec, paths)
    if not allowed:
        return spec, None
    # nothing this station can do: the best the analyzer allows, whose problems the check lists
    why = f"the best the analyzer ({paths} paths) allows; this station cannot do any method as wired"
    return dataclasses.replace(spec, calibration=dataclasses.replace(cal, method=allowed[0], chosen=why)), why


def check_two_port(spec: SequenceSpec, problems: Problems, capabilities: object | None) -> None:
    """Every problem of the sequence's method and figures that a two-port run would meet."""
    cal = spec.calibration
    method = cal.method if cal is not None else "one-port"
    if method in TRANSMISSION_METHODS:
        _check_analyzer(spec, problems, method, capabilities)
        _check_routes(spec, problems, method)
    if spec.measurement.device_max_vswr is not None and method != THRU_RESPONSE:
        problems.add("measurement.device_max_vswr", f"a {method} calibration measures the devices' match; a stated "
                     "device match serves only a thru response, which cannot", "remove device_max_vswr")
    if method == THRU_RESPONSE:
        _check_thru_response(spec, problems)
        return
    _check_figures(spec, problems, method)


def _check_thru_response(spec: SequenceSpec, problems: Problems) -> None:
    """A thru response corrects transmission only: insertion loss is all it can judge, and the
    mismatch it leaves needs the analyzer's raw match stated."""
    fix = 'calibrate with method = "solt" or "one-path", which measure the match too'
    judged = judged_figures(spec)
    reflections = [name for name in judged if name != figures.INSERTION_LOSS]
    if reflections:
        problems.add("measurement.judge", f"a thru-response calibration measures transmission only; it cannot judge "
                     f"{', '.join(reflections)}", f'judge = ["{figures.INSERTION_LOSS}"] alone, or {fix}')
    for index, band in enumerate(spec.bands, 1):
        for key, limit in (("max_vswr", None if math.isinf(band.max_vswr) else band.max_vswr),
                           ("min_return_loss_db", band.min_return_loss_db)):
            if limit is not None:
                problems.add(f"band[{index}].{key}", f"band {band.name} limits reflection, and a thru-response "
                             "calibration measures transmission only", f"remove {key} from the band, or {fix}")
    settings = spec.station.uncertainty
    if settings.raw_source_match is None or settings.raw_load_match is None:
        key = "station.uncertainty" if spec.station.source == spec.source else "uncertainty"
        problems.add(key, "a thru response leaves the analyzer's source and load match uncorrected, and the station "
                     "does not state them", "add raw_source_match_db and raw_load_match_db (the analyzer's "
                     "uncorrected port match, from its data sheet)", source=spec.station.source)


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
