"""Measuring suspect results again: ``lineproof run --remeasure-suspect RUN_ID``.

A new run of the original run's own sequence (the copy in its folder), on its station, whose
batch is the original run's suspect devices -- listed, in their original order and switch
slots, so that an attended station prompts for each by serial.  It calibrates, qualifies and
verifies as the sequence says, and its run row names the run it remeasures
(``runs.remeasure_of``); the original run's records are left as they are, and its report shows
each suspect result beside its new one.  Devices already measured again in an earlier such
run are left out; a remeasuring run that stopped is resumed like any other.
"""

from __future__ import annotations

import dataclasses

from lineproof.errors import InputError
from lineproof.recording import RunFolder
from lineproof.run_steps import StopSignal
from lineproof.run_view import RunView
from lineproof.runner import RunOptions, RunOutcome, check_run_id, existing_records, kept_sequence, start_run
from lineproof.sequence import DevicesSpec, DeviceUnit, SequenceSpec
from lineproof.store import ResultStore, open_store


def suspect_units(store: ResultStore, run_id: str, spec: SequenceSpec, skip_done: bool = True) -> tuple[DeviceUnit, ...]:
    """The run's suspect devices as batch units (slots and models as the sequence lists
    them); ``skip_done`` leaves out those already measured again in another run."""
    done: set[str] = set()
    if skip_done:
        done = {str(r[0]).lower() for r in store.query(
            "SELECT d.serial FROM devices d JOIN runs r ON r.run_id = d.run_id WHERE r.remeasure_of = ?", (run_id,))}
    listed = {u.serial.lower(): u for u in (spec.devices.units if spec.devices else ())}
    units = []
    for serial, model in store.query("SELECT serial, model FROM devices WHERE run_id = ? AND suspect = 1"
                                     " ORDER BY position", (run_id,)):
        key = str(serial).lower()
        if key in done:
            continue
        original = listed.get(key)
        units.append(DeviceUnit(str(serial), str(model), original.slot if original else None, f"suspect {serial}"))
    return tuple(units)


def restricted_to(spec: SequenceSpec, units: tuple[DeviceUnit, ...]) -> SequenceSpec:
    """``spec`` with its batch replaced by ``units`` (listed)."""
    devices = spec.devices or DevicesSpec(units[0].model if units else "", "listed")
    return dataclasses.replace(spec, devices=dataclasses.replace(devices, entry="listed", units=units, max_count=None))


def remeasure_suspect(run_id: str, options: RunOptions, view: RunView, stop: StopSignal) -> RunOutcome:
    """A new run that measures ``run_id``'s suspect results again."""
    check_run_id(run_id)
    records, database = existing_records(None, options.records)
    with open_store(database) as store:
        row = store.run(run_id)
        if row is None:
            raise InputError(f"no run {run_id} in this database", path=str(store.path),
                             fix="check the run id (lineproof results --runs lists them) and --records")
        spec = kept_sequence(RunFolder(records, run_id), row)
        units = suspect_units(store, run_id, spec)
        if not units:
            raise InputError(f"run {run_id} has no suspect result left to measure again", path=str(store.path),
                             fix="lineproof results --run RUN_ID shows its devices; suspect ones are marked")
    if not spec.has_step("measure-batch"):
        raise InputError("the run's sequence measures no batch", key="step", fix="remeasure with a batch sequence")
    view.note(f"measuring again the {len(units)} suspect result(s) of run {run_id}: "
              f"{', '.join(u.serial for u in units)}")
    return start_run(restricted_to(spec, units), dataclasses.replace(options, station_file=None), view, stop,
                     remeasure_of=run_id)
