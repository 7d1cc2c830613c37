"""Cross-checks of a parsed sequence against the files and instruments it names.

Run before anything touches an instrument: the analyzer's profile (range, points per sweep,
ports, parameters), the calibration method against what that analyzer can do, the cal kit,
the check standard's reference data, the objects a simulated bench offers, the switch wiring
and the order of the steps.  Every problem goes into the same :class:`Problems` list.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from lineproof.errors import InputError
from lineproof.sequence import SequenceSpec, profile_argument, resolve_path
from lineproof.toml_problems import Problems

#: Standards a kit must define for each calibration method (short names of
#: :data:`lineproof.calibration.METHOD_NAMES`).
METHOD_STANDARDS: dict[str, tuple[str, ...]] = {
    "one-port": ("open", "short", "load"),
    "one-path": ("open", "short", "load", "thru"),
    "solt": ("open", "short", "load", "thru"),
    "thru-response": ("thru",),
}


def check_references(spec: SequenceSpec, problems: Problems) -> SequenceSpec:
    """Add every problem of ``spec`` that needs another file or a capability to see; returns
    ``spec`` with its calibration method made concrete (see :mod:`lineproof.sequence_methods`)."""
    from lineproof.sequence_methods import check_two_port, resolve_method

    capabilities = _check_analyzer(spec, problems)
    spec, _ = resolve_method(spec, getattr(capabilities, "paths", None))
    _check_calibration(spec, problems, capabilities)
    _check_check_standard(spec, problems)
    _check_steps(spec, problems)
    _check_devices(spec, problems)
    _check_switch(spec, problems)
    _check_simulated_bench(spec, problems)
    check_two_port(spec, problems, capabilities)
    _check_records(spec, problems)
    return spec


def _station_key(spec: SequenceSpec, key: str) -> tuple[str, str]:
    """The key and file where a station setting is written (the sequence or a --station file)."""
    if spec.station.source == spec.source:
        return f"station.{key}", spec.source
    return key, spec.station.source


def _profile_path(spec: SequenceSpec, written: str) -> str:
    return profile_argument(spec.station.source, written)


def _check_analyzer(spec: SequenceSpec, problems: Problems):  # -> AnalyzerCapabilities | None
    from lineproof.drivers.profiles import load_analyzer_profile

    key, source = _station_key(spec, "analyzer.profile")
    try:
        profile = load_analyzer_profile(_profile_path(spec, spec.station.analyzer.profile))
    except InputError as exc:
        problems.items.extend(getattr(exc, "problems", None) or [exc])  # a profile's every problem
        problems.add(key, "the analyzer profile named here cannot be used (see above)",
                     "name a shipped profile or a valid profile file", source=source)
        return None
    caps = profile.capabilities
    plan = spec.plan
    where = f"{caps.frequency_min_hz / 1e6:g}-{caps.frequency_max_hz / 1e6:g} MHz ({profile.name})"
    if plan.start_hz < caps.frequency_min_hz:
        problems.add("sweep.start_hz", f"the sweep starts at {plan.start_hz / 1e6:g} MHz, below the analyzer's range {where}",
                     f"start at {caps.frequency_min_hz:g} Hz or above")
    if plan.stop_hz > caps.frequency_max_hz:
        problems.add("sweep.stop_hz", f"the sweep stops at {plan.stop_hz / 1e6:g} MHz, above the analyzer's range {where}",
                     f"stop at {caps.frequency_max_hz:g} Hz or below")
    if plan.points > caps.max_points and not spec.allow_segments:
        segments = -(-plan.points // caps.max_points)
        problems.add("sweep.points", f"{plan.points} points, but the analyzer gives at most {caps.max_points} per sweep "
                     f"({profile.name}); it would take {segments} segments",
                     f"lower points to {caps.max_points} or less, or set allow_segments = true to sweep in segments")
    _check_bands(spec, problems, caps, where)
    port = spec.station.analyzer.port
    if port > caps.ports:
        port_key, port_source = _station_key(spec, "analyzer.port")
        problems.add(port_key, f"port {port}, but the analyzer has {caps.ports} port(s) ({profile.name})",
                     f"use a port from 1 to {caps.ports}", source=port_source)
    return caps


def _check_bands(spec: SequenceSpec, problems: Problems, caps, where: str) -> None:
    grid = spec.plan.frequencies()
    for index, band in enumerate(spec.bands, 1):
        key = f"band[{index}]"
        if band.start_hz < caps.frequency_min_hz or band.stop_hz > caps.frequency_max_hz:
            problems.add(f"{key}.start_hz", f"band {band.name} ({band.start_hz / 1e6:g}-{band.stop_hz / 1e6:g} MHz) "
                         f"lies outside the analyzer's range {where}", "use an analyzer that covers it or drop the band")
        elif band.start_hz < spec.plan.start_hz or band.stop_hz > spec.plan.stop_hz:
            problems.add(f"{key}.start_hz", f"band {band.name} ({band.start_hz / 1e6:g}-{band.stop_hz / 1e6:g} MHz) "
                         f"is not inside the sweep ({spec.plan.describe()})", "widen [sweep] to cover every band")
        elif not np.any((grid >= band.start_hz) & (grid <= band.stop_hz)):
            problems.add(f"{key}.start_hz", f"band {band.name} holds no sweep point", "add points to [sweep]")


def _check_calibration(spec: SequenceSpec, problems: Problems, caps) -> None:
    cal = spec.calibration
    if cal is None:
        return
    if cal.reuse is not None and not spec.has_step("calibrate"):
        problems.add("calibration.reuse", "a stored calibration is loaded by the calibrate step, and this sequence "
                     "has none", 'add a do = "calibrate" step before the steps that need it, or remove reuse')
    if caps is not None:
        from lineproof.calibration import choose_method
        from lineproof.errors import CalibrationError

        port = spec.station.analyzer.port
        try:
            choose_method(caps.paths, cal.method)
        except CalibrationError as exc:
            problems.add("calibration.method", f"{exc} ({caps.ports} port(s))",
                         "choose a method the analyzer allows, or an analyzer with the paths this one needs")
        else:
            # A port beyond the analyzer's is reported once, at [analyzer.port] (_check_analyzer).
            if cal.method == "one-port" and port <= caps.ports and f"S{port}{port}" not in caps.parameters:
                problems.add("calibration.method", f"the analyzer does not measure S{port}{port} for a one-port "
                             "calibration", "use the port its profile measures")
    path = resolve_path(cal.kit, spec)
    if path is None:
        problems.add("calibration.kit", f"cal kit file {cal.kit!r} not found (looked beside the sequence, "
                     "in the current folder and among the shipped kits)", "give the path of your kit's .toml file")
        return
    from lineproof.calkit import load_kit

    try:
        kit = load_kit(path)
    except InputError as exc:
        problems.absorb(exc, "calibration.kit")
        return
    kinds = {standard.kind for standard in kit.standards.values()}
    missing = [kind for kind in METHOD_STANDARDS.get(cal.method, ()) if kind not in kinds]
    if missing:
        problems.add("calibration.kit", f"kit {kit.name} has no {', '.join(missing)} standard for a {cal.method} calibration",
                     f"add the standards to {path} or use another kit")
        return
    from lineproof.calibration import check_kit_for_sweep

    for problem in check_kit_for_sweep(kit, spec.plan.frequencies(), METHOD_STANDARDS.get(cal.method, ())):
        problems.absorb(problem, "calibration.kit")


def _check_check_standard(spec: SequenceSpec, problems: Problems) -> None:
    check = spec.check_standard
    if check is None or check.reference_file is None:
        return
    path = resolve_path(check.reference_file, spec)
    if path is None:
        problems.add("check_standard.reference_file", f"reference file {check.reference_file!r} not found",
                     "give the path of the check standard's Touchstone (.s1p) data")
        return
    from lineproof.verification import read_reference

    try:
        frequencies, _ = read_reference(path)
    except InputError as exc:
        problems.add("check_standard.reference_file", exc.problem, exc.fix)
        return
    if frequencies[0] > spec.plan.start_hz * (1 + 1e-9) or frequencies[-1] < spec.plan.stop_hz * (1 - 1e-9):
        problems.add("check_standard.reference_file",
                     f"the reference covers {frequencies[0] / 1e6:g}-{frequencies[-1] / 1e6:g} MHz, not the whole sweep "
                     f"({spec.plan.describe()})", "give reference data over the whole sweep or narrow the sweep")


def _check_steps(spec: SequenceSpec, problems: Problems) -> None:
    from lineproof.sequence_methods import needs_termination

    needs: dict[str, tuple[str | None, str]] = {
        "calibrate": ("calibration", "add a [calibration] table with method and kit"),
        "qualify-termination": ("termination", "add a [termination] table with the termination's name"),
        "verify": ("check_standard", "add a [check_standard] table"),
        "measure-batch": ("devices", "add a [devices] table"),
        "repeatability-study": ("study", 'add a [study] table with kind = "repeatability" and reconnections'),
    }
    seen: set[str] = set()
    transmission_only = spec.calibration is not None and spec.calibration.method == "thru-response"
    for step in spec.steps:
        table, fix = needs.get(step.action, (None, ""))
        if table is not None and getattr(spec, table) is None:
            problems.add(step.key, f"step {step.action!r} needs a [{table}] table", fix)
        if step.action in ("qualify-termination", "verify", "measure-batch", "repeatability-study") and "calibrate" not in seen:
            problems.add(step.key, f"step {step.action!r} comes before any calibrate step",
                         "put a do = \"calibrate\" step before it")
        if transmission_only:
            _check_transmission_step(step, problems)
        if step.action == "measure-batch":
            if "measure-batch" in seen:
                problems.add(step.key, "a sequence measures one batch", "keep one measure-batch step")
            if needs_termination(spec) and "qualify-termination" not in seen:
                problems.add(step.key, "the batch would be measured on a termination nobody qualified",
                             "put a do = \"qualify-termination\" step before it")
            if needs_termination(spec) and spec.termination is None:
                problems.add(step.key, "the batch needs a [termination] for the devices' outputs",
                             "add a [termination] table")
        if step.action == "repeatability-study":
            _check_study_step(spec, step, seen, problems)
        seen.add(step.action)
    if spec.reverify.any and transmission_only:
        problems.add("reverify", "a thru-response calibration cannot read the check standard's reflection",
                     'remove [reverify], or calibrate with method = "solt" or "one-path"')
    elif spec.reverify.any:
        if spec.check_standard is None:
            problems.add("reverify", "re-verification needs a [check_standard]", "add one or remove [reverify]")
        if "measure-batch" not in seen:
            problems.add("reverify", "re-verification happens during a batch, and this sequence measures none",
                         "remove [reverify] or add a measure-batch step")


def _check_transmission_step(step, problems: Problems) -> None:  # noqa: ANN001
    """A thru-response run measures transmission only: no reflection to qualify a termination
    or read a check standard with, and the devices' outputs go to analyzer port 2."""
    why = {"qualify-termination": "it cannot qualify a termination, and the devices' outputs go to analyzer port 2",
           "verify": "it cannot read the check standard's reflection",
           "repeatability-study": "a repeatability study reads the devices' match"}.get(step.action)
    if why is not None:
        problems.add(step.key, f"step {step.action!r}: a thru-response calibration measures transmission only, so "
                     f"{why}", 'remove the step (and the table it needs), or calibrate with method = "solt" or '
                     '"one-path"')


def _check_study_step(spec: SequenceSpec, step, seen: set[str], problems: Problems) -> None:  # noqa: ANN001
    if "qualify-termination" not in seen or spec.termination is None:
        problems.add(step.key, "the study's devices would be measured on a termination nobody qualified",
                     "put a do = \"qualify-termination\" step (and a [termination]) before it")
    if spec.devices is None or spec.devices.entry != "listed" or len(spec.devices.units) < 2:
        problems.add(step.key, "a repeatability study measures at least two listed devices",
                     'list the devices in [devices] (entry = "listed")')
    if "measure-batch" in seen or spec.has_step("measure-batch"):
        problems.add(step.key, "a sequence is a batch or a repeatability study, not both",
                     "keep one of measure-batch and repeatability-study")


def _check_devices(spec: SequenceSpec, problems: Problems) -> None:
    devices = spec.devices
    if devices is None:
        return
    hands = spec.station.connected_by
    if devices.entry == "scanned" and hands != "operator":
        problems.add("devices.entry", f"serials are entered at the bench, but connected_by = {hands!r}: nobody is there",
                     'list the serials (entry = "listed") or let an operator connect the devices')
    if hands == "switch":
        for unit in devices.units:
            if unit.slot is None:
                problems.add(unit.key, f"device {unit.serial} has no switch slot",
                             "give each device a [[devices.unit]] table with serial and slot")


def _needed_objects(spec: SequenceSpec, port_1_only: bool = False) -> list[tuple[str, str]]:
    """(object name, the key that names it) for everything the run will connect (with
    ``port_1_only``, what it connects to the station's port alone: no thru)."""
    found: list[tuple[str, str]] = []
    if spec.termination is not None:
        found.append((spec.termination.name, "termination.name"))
    if spec.check_standard is not None:
        found.append((spec.check_standard.name, "check_standard.name"))
    for step in spec.steps:
        if step.action == "route" and step.target:
            found.append((step.target, step.key.replace(".do", ".to")))
    cal = spec.calibration
    path = resolve_path(cal.kit, spec) if cal is not None and spec.has_step("calibrate") else None
    if path is not None:
        from lineproof.calkit import load_kit

        try:
            kit = load_kit(path)
        except InputError:
            return found  # reported by _check_calibration
        found += [(name, "calibration.kit") for name, standard in kit.standards.items()
                  if standard.kind in METHOD_STANDARDS.get(cal.method, ()) and not (port_1_only and standard.kind == "thru")]
    return found


def _check_switch(spec: SequenceSpec, problems: Problems) -> None:
    switch = spec.station.switch
    if switch is None or spec.station.connected_by != "switch":
        return
    key, source = _station_key(spec, "switch.wiring")
    for name, used_at in _needed_objects(spec, port_1_only=True):
        if name not in switch.wiring:
            problems.add(used_at, f"{name!r} is not wired to the switch", f"add it to [{key}] in {source}")
    two_port = spec.calibration is not None and spec.calibration.method in ("solt", "one-path", "thru-response")
    for unit in spec.devices.units if spec.devices and not two_port else ():  # two-port routes: sequence_methods
        if unit.slot is not None and unit.slot not in switch.wiring:
            problems.add(unit.key.replace(".serial", ".slot"), f"slot {unit.slot!r} of {unit.serial} is not wired to the switch",
                         f"add it to [{key}] in {source}")
    from lineproof.drivers.profiles import load_switch_profile

    profile_key, _ = _station_key(spec, "switch.profile")
    try:
        load_switch_profile(_profile_path(spec, switch.profile))
    except InputError as exc:
        problems.items.extend(getattr(exc, "problems", None) or [exc])  # a profile's every problem
        problems.add(profile_key, "the switch profile named here cannot be used (see above)",
                     "name a shipped switch profile or a valid profile file", source=source)


def _check_records(spec: SequenceSpec, problems: Problems) -> None:
    """The results database the sequence names: a URL this version can use, and -- read only --
    an existing file that a run would accept (SQLite, lineproof's schema marker).  A location
    the sequence leaves to --records or the default folder is checked by the run itself."""
    from lineproof.store import DATABASE_NAME, DEFAULT_RECORDS, database_file_problem, url_problem

    if spec.database is None and spec.records_folder is None:
        return
    key = "records.database" if spec.database is not None else "records.folder"
    if spec.database is not None:
        refused = url_problem(spec.database)
        if refused is not None:
            problems.add(key, *refused)
            return
    folder = spec.folder / spec.records_folder if spec.records_folder else DEFAULT_RECORDS
    if folder.exists() and not folder.is_dir():
        problems.add("records.folder" if spec.records_folder else key, f"the records folder {str(folder)!r} is a file",
                     "name a folder (new, or one lineproof wrote to)")
        return
    path = folder / (spec.database or DATABASE_NAME)
    found = database_file_problem(path)
    if found is not None:
        problems.add(key, f"{path}: {found[0]}", found[1])


def _check_simulated_bench(spec: SequenceSpec, problems: Problems) -> None:
    scenario_name = spec.station.simulated_bench
    if scenario_name is None:
        return
    from lineproof.simulators.scenario import find_scenario, load_scenario

    key, source = _station_key(spec, "simulated_bench")
    local = Path(spec.station.source).parent / scenario_name
    try:
        path = find_scenario(local if local.is_file() else scenario_name)
    except InputError as exc:  # no such file: the sequence's key is what is wrong
        problems.add(key, exc.problem, exc.fix or "name a shipped scenario (e.g. demo-bench) or a scenario file",
                     source=source)
        return
    try:
        scenario = load_scenario(path)
    except InputError as exc:  # the scenario file is wrong: its own file, line and key, and who named it
        problems.absorb(exc, key, source=source, what="the simulated bench scenario")
        return
    if spec.station.connected_by == "switch":
        return  # the switch reaches what the scenario wires; _check_switch covered the names
    for name, used_at in _needed_objects(spec):
        if name not in scenario.objects:
            problems.add(used_at, f"the simulated bench {scenario.name!r} has no object {name!r}",
                         f"use one of: {', '.join(sorted(scenario.objects))[:300]}")
    for unit in spec.devices.units if spec.devices else ():
        if unit.serial not in scenario.objects:
            problems.add(unit.key, f"the simulated bench has no device {unit.serial!r}",
                         "list serials the scenario's populations make")
