"""Benchmark: a 50-device unattended batch on the simulated bench with realistic sweep times.

A switch matrix routes the standards, the termination, a check standard and fifty device slots
to a one-port analyzer whose sweeps take their real time (401 points at 10 kHz IF bandwidth,
about 53 ms; the switch settles in 12 ms).  Prints the wall time of the run (calibrate,
qualify, verify, 50 devices with a check every 10 and at the end) divided by the simulator's
summed busy time (its sweeps -- with the model's computing of each, which on hardware is part
of the sweep -- and the switch's settling).  For reference it then sweeps the same devices with
the drivers alone (route, sweep, read; nothing recorded): the floor the instrument dialogue sets,
and how far the run is above it.  Goal <= 1.05: recording each device (correction, uncertainty,
judging, Touchstone file with fsync, database commit, journal) runs while the next device is
routed and swept.  The figures depend on the machine and on what else it runs (the simulator
shares its cores): run it a few times; DEVELOPERS.md gives what it gave here.

The simulated bench runs in its own process, as instruments do: sharing the harness's
interpreter would charge the simulator's thread switches to the harness.

    .venv/bin/python tests/bench/bench_batch.py [--devices 50] [--ifbw 10000] [--points 401]
                                                [--hands switch|simulated-operator]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from lineproof.journal import RunJournal
from lineproof.recording import RunFolder
from lineproof.run_steps import RunState, StepRunner, StopSignal
from lineproof.runner import _facts
from lineproof.sequence import load_sequence
from lineproof.stations import open_station
from lineproof.store import ResultStore

SCENARIO = Path(__file__).resolve().parent.parent / "scenarios" / "batch-bench.toml"
CHANNELS_PER_MODULE = 24

# Serve the bench in this child process; on each line "busy" from the parent, answer the summed
# busy time: the analyzer's sweeps, the simulator's own computing of each sweep (on hardware it
# is part of the sweep; the model starts its sweep clock after it), and the switch's settling
# (the union of its settling spans: a close that follows an open at once settles once).
SERVE = """
import json, sys, time
from lineproof.simulators.bench import SimulatedBench
from lineproof.simulators import analyzer_sim, switch_sim
computing = {"total": 0.0}
original_sweep = analyzer_sim.SimulatedAnalyzer.sweep
def sweep(self):
    start = time.perf_counter()
    try:
        return original_sweep(self)
    finally:
        computing["total"] += time.perf_counter() - start
analyzer_sim.SimulatedAnalyzer.sweep = sweep
settled = {"total": 0.0, "end": 0.0}
original = switch_sim.SimulatedSwitch._settle
def settle(self):
    now = time.monotonic()
    original(self)
    start = max(now, settled["end"])
    if self.busy_until > start:
        settled["total"] += self.busy_until - start
        settled["end"] = self.busy_until
switch_sim.SimulatedSwitch._settle = settle
with SimulatedBench(sys.argv[1]) as bench:
    switch = bench.switch_resource if bench.switch is not None else ""
    print(json.dumps({"resource": bench.visa_resource, "control": bench.control_address, "switch": switch}),
          flush=True)
    for line in sys.stdin:
        print(json.dumps({"sweeps": bench.analyzer.sweeps_done, "sweeping": bench.analyzer.busy_seconds,
                          "computing": computing["total"], "settling": settled["total"]}), flush=True)
"""

SEQUENCE_HEAD = """\
[sequence]
name = "benchmark batch"

[station]
name = "benchmark bench (simulated, in its own process)"
bench_control = "{control}"
connected_by = "{hands}"

[station.analyzer]
profile = "generic-scpi-reflectometer"
resource = "{resource}"

[sweep]
start_hz = 100e6
stop_hz = 500e6
points = {points}
if_bandwidth_hz = {ifbw}

[[band]]
name = "2m"
start_hz = 144e6
stop_hz = 148e6
max_vswr = 1.10

[[band]]
name = "70cm"
start_hz = 420e6
stop_hz = 450e6
max_vswr = 1.20

[calibration]
kit = "kits/n50-illustrative.toml"

[termination]
name = "good-termination"

[check_standard]
name = "check-75"
reference_vswr = 1.5
tolerance = 0.015

[decision]
rule = "guard-banded"

[reverify]
every_devices = 10
at_end = true

[[step]]
do = "calibrate"
[[step]]
do = "qualify-termination"
[[step]]
do = "verify"
[[step]]
do = "measure-batch"

[devices]
model = "TM-150 inline meter head"
"""

FIXED = ("open", "short", "load", "good-termination", "check-75")


def channel(index: int) -> str:
    """The index-th channel (from 0) of a matrix of 24-channel modules: 1!1, ..., 1!24, 2!1, ..."""
    return f"{index // CHANNELS_PER_MODULE + 1}!{index % CHANNELS_PER_MODULE + 1}"


def serials(count: int) -> list[str]:
    return [f"TM150-{n:04d}" for n in range(1, count + 1)]


def scenario_text(devices: int) -> str:
    """The test bench with sweeps in real time, ``devices`` meter heads, and a switch wired to all."""
    text = SCENARIO.read_text(encoding="utf-8").replace("time_scale = 0.1", "time_scale = 1.0")
    text = text.replace("count = 10", f"count = {devices}")
    modules = -(-(len(FIXED) + devices) // CHANNELS_PER_MODULE)
    lines = [text, "[switch]", 'identity = "Tarnmoor Instruments,SIM-X72 switch (simulated),SIMX999,1.0"',
             f"modules = {modules}", f"channels_per_module = {CHANNELS_PER_MODULE}", "settle_s = 0.012", ""]
    for index, name in enumerate(FIXED + tuple(serials(devices))):
        output = '\noutput = "good-termination"' if name.startswith("TM150-") else ""
        lines += ["[[switch.channel]]", f'channel = "{channel(index)}"', f'object = "{name}"{output}', ""]
    return "\n".join(lines)


def sequence_text(bench: dict[str, str], options: argparse.Namespace, profile: Path) -> str:
    text = SEQUENCE_HEAD.format(hands=options.hands, points=options.points, ifbw=options.ifbw, **bench)
    if options.hands == "simulated-operator":
        return text + "serials = [" + ", ".join(f'"{s}"' for s in serials(options.devices)) + "]\n"
    for index, serial in enumerate(serials(options.devices)):
        text += f'[[devices.unit]]\nserial = "{serial}"\nslot = "slot-{index + 1:02d}"\n'
    text += f'\n[station.switch]\nprofile = "{profile.as_posix()}"\nresource = "{bench["switch"]}"\n'
    text += "\n[station.switch.wiring]\n"
    for index, name in enumerate(FIXED):
        text += f'"{name}" = "{channel(index)}"\n'
    for index in range(options.devices):
        text += f'"slot-{index + 1:02d}" = "{channel(len(FIXED) + index)}"\n'
    return text


class QuietView:
    """Collects what a run shows without printing it; notes the clock and the simulator's busy
    time when the first check (the end of the preparation) is done."""

    def __init__(self, busy: object) -> None:
        self.devices = 0
        self.busy = busy
        self.batch_start: tuple[float, float] | None = None

    def run_started(self, *args: object, **kwargs: object) -> None: ...
    def step_started(self, *args: object, **kwargs: object) -> None: ...
    def step_advanced(self, *args: object, **kwargs: object) -> None: ...
    def step_finished(self, *args: object, **kwargs: object) -> None: ...
    def qualification(self, *args: object, **kwargs: object) -> None: ...
    def note(self, *args: object, **kwargs: object) -> None: ...
    def run_finished(self, *args: object, **kwargs: object) -> None: ...
    def close(self, *args: object, **kwargs: object) -> None: ...

    def ask(self, prompt: str) -> str | None:
        return None

    def verification(self, *args: object, **kwargs: object) -> None:
        if self.batch_start is None:
            self.batch_start = (time.perf_counter(), self.busy()[1])  # type: ignore[operator]

    def device_recorded(self, recorded: object) -> None:
        self.devices += 1


def drivers_alone(station: object, spec: object, busy: object) -> tuple[float, float, int]:
    """The same devices swept by the drivers alone -- route, sweep, read, nothing recorded: the
    floor that the instrument dialogue sets (wall, busy, sweeps)."""
    operator = station.operator  # type: ignore[attr-defined]
    port = station.spec.analyzer.port  # type: ignore[attr-defined]
    units = spec.devices.units  # type: ignore[attr-defined]
    sweeps_before, busy_before = busy()  # type: ignore[operator]
    start = time.perf_counter()
    for unit in units:
        operator.connect(port, unit.serial, "good-termination", "")
        station.analyzer.measure([f"S{port}{port}"])  # type: ignore[attr-defined]
    wall = time.perf_counter() - start
    sweeps_after, busy_after = busy()  # type: ignore[operator]
    return wall, busy_after - busy_before, sweeps_after - sweeps_before


def run_batch(work: Path, busy: object) -> dict[str, float]:
    """Run the sequence in ``work`` in this process; wall and busy times of the run and the batch,
    then the drivers alone on the same devices for reference."""
    spec = load_sequence(work / "batch.toml")
    view = QuietView(busy)
    with open_station(spec, view.ask) as station, ResultStore(work / "results.sqlite") as store:
        folder = RunFolder(work, "run-bench")
        journal = RunJournal(folder.path)
        store.start_run({"run_id": "run-bench", "started_utc": "-", "status": "running", "sequence_name": spec.name,
                         "station": station.spec.name, "operator": "benchmark", "software_version": "-",
                         "analyzer": station.identity.describe(), "resource": station.identity.resource,
                         "sweep_plan": spec.plan.describe()})
        runner = StepRunner(spec, station, store, journal, folder, _facts(spec, "run-bench", station, "benchmark"),
                            view, StopSignal(), RunState())
        sweeps_before, busy_before = busy()  # type: ignore[operator]
        start = time.perf_counter()
        runner.run()
        end = time.perf_counter()
        sweeps_after, busy_after = busy()  # type: ignore[operator]
        journal.close()
        reference = drivers_alone(station, spec, busy)
    assert view.batch_start is not None
    return {"reference": reference, "wall": end - start, "busy": busy_after - busy_before, "sweeps": sweeps_after - sweeps_before,
            "devices": view.devices, "batch_wall": end - view.batch_start[0],
            "batch_busy": busy_after - view.batch_start[1]}


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--devices", type=int, default=50)
    parser.add_argument("--ifbw", type=float, default=10e3)
    parser.add_argument("--points", type=int, default=401)
    parser.add_argument("--hands", choices=("switch", "simulated-operator"), default="switch")
    options = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        work = Path(folder)
        (work / "bench.toml").write_text(scenario_text(options.devices), encoding="utf-8")
        profile = work / "switch.toml"
        modules = -(-(len(FIXED) + options.devices) // CHANNELS_PER_MODULE)
        profile.write_text(f'[profile]\nname = "bench-switch"\nkind = "switch"\nbased_on = "generic-scpi-switch"\n\n'
                           f"[capabilities]\nmodules = {modules}\nchannels_per_module = {CHANNELS_PER_MODULE}\n",
                           encoding="utf-8")
        server = subprocess.Popen([sys.executable, "-c", SERVE, str(work / "bench.toml")], stdin=subprocess.PIPE,
                                  stdout=subprocess.PIPE, text=True)
        try:
            bench = json.loads(server.stdout.readline())

            def busy() -> tuple[int, float]:
                server.stdin.write("busy\n")
                server.stdin.flush()
                reply = json.loads(server.stdout.readline())
                return reply["sweeps"], reply["sweeping"] + reply["computing"] + reply["settling"]

            (work / "batch.toml").write_text(sequence_text(bench, options, profile), encoding="utf-8")
            figures = run_batch(work, busy)
        finally:
            server.stdin.close()
            server.wait(timeout=30)
    sweep_s = options.points * (1 / options.ifbw + 20e-6) + 0.005
    print(f"batch: {figures['devices']} devices connected by {options.hands}, {figures['sweeps']} sweeps of "
          f"{options.points} points at {options.ifbw:g} Hz IF bandwidth (~{sweep_s * 1e3:.0f} ms each)")
    print(f"wall time of the run        {figures['wall']:8.3f} s")
    print(f"simulator busy time         {figures['busy']:8.3f} s   (sweeps, their computing, switch settling)")
    print(f"ratio wall / busy           {figures['wall'] / figures['busy']:8.3f}   (goal <= 1.05)")
    print(f"overhead per sweep          {(figures['wall'] - figures['busy']) / figures['sweeps'] * 1e3:8.2f} ms")
    print(f"the batch alone (after the first check): wall {figures['batch_wall']:.3f} s, busy "
          f"{figures['batch_busy']:.3f} s, ratio {figures['batch_wall'] / figures['batch_busy']:.3f}")
    wall, busy, sweeps = figures["reference"]
    print(f"for reference, the drivers alone (route, sweep, read each device; nothing recorded): "
          f"wall {wall:.3f} s, busy {busy:.3f} s, ratio {wall / busy:.3f}, overhead {(wall - busy) / sweeps * 1e3:.2f} ms "
          "per sweep")
    print(f"the run above that floor      {figures['wall'] / figures['busy'] - wall / busy:+8.3f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
