"""Benchmark: a 50-device unattended batch on the simulated bench with realistic sweep times.

Prints wall time of the run (calibrate, qualify, verify, 50 devices with a check every 10 and at
the end) divided by the simulator's summed busy time (its sweeps, as the bench reports them).
Goal <= 1.05: recording (correction, uncertainty, judging, Touchstone file with fsync, database
commit, journal) overlaps the next device's sweep, so the analyzer is hardly ever idle.  The
simulated bench runs in its own process, as an instrument would: sharing the harness's
interpreter lock would charge the simulator's thread switches to the harness.

    .venv/bin/python tests/bench/bench_batch.py [--devices 50] [--ifbw 10000] [--points 401]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
SCENARIO = HERE.parent / "scenarios" / "batch-bench.toml"

from lineproof.journal import RunJournal  # noqa: E402
from lineproof.recording import RunFolder  # noqa: E402
from lineproof.run_steps import RunState, StepRunner, StopSignal  # noqa: E402
from lineproof.runner import _facts  # noqa: E402
from lineproof.sequence import load_sequence  # noqa: E402
from lineproof.simulators.control import BenchControlClient  # noqa: E402
from lineproof.stations import open_station  # noqa: E402
from lineproof.store import ResultStore  # noqa: E402

SEQUENCE = """\
[sequence]
name = "benchmark batch"

[station]
name = "benchmark bench (simulated, in its own process)"
bench_control = "{control}"
connected_by = "simulated-operator"

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

[devices]
model = "TM-150 inline meter head"
serials = [{serials}]

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
"""


class QuietView:
    """Collects what a run shows without printing it; notes the simulator's busy time and the
    clock when the first check (the end of the preparation) is done."""

    def __init__(self) -> None:
        self.devices = 0
        self.control = None
        self.batch_start: tuple[float, float] | None = None

    def run_started(self, *args: object, **kwargs: object) -> None: ...
    def step_started(self, *args: object, **kwargs: object) -> None: ...
    def step_advanced(self, *args: object, **kwargs: object) -> None: ...
    def step_finished(self, *args: object, **kwargs: object) -> None: ...
    def qualification(self, *args: object, **kwargs: object) -> None: ...
    def verification(self, *args: object, **kwargs: object) -> None:
        if self.batch_start is None and self.control is not None:
            self.batch_start = (time.perf_counter(), self.control.request("status")["busy_seconds"])

    def note(self, *args: object, **kwargs: object) -> None: ...
    def ask(self, prompt: str) -> str | None:
        return None

    def run_finished(self, *args: object, **kwargs: object) -> None: ...
    def close(self) -> None: ...

    def device_recorded(self, recorded: object) -> None:
        self.devices += 1


SERVE = """
import json, sys
from lineproof.simulators.bench import SimulatedBench
with SimulatedBench(sys.argv[1]) as bench:
    print(json.dumps({"resource": bench.visa_resource, "control": bench.control_address}), flush=True)
    sys.stdin.read()
"""


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--devices", type=int, default=50)
    parser.add_argument("--ifbw", type=float, default=10e3)
    parser.add_argument("--points", type=int, default=401)
    options = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        work = Path(folder)
        scenario = SCENARIO.read_text(encoding="utf-8").replace("time_scale = 0.1", "time_scale = 1.0")
        scenario = scenario.replace("count = 10", f"count = {options.devices}")
        (work / "bench.toml").write_text(scenario, encoding="utf-8")
        server = subprocess.Popen([sys.executable, "-c", SERVE, str(work / "bench.toml")], stdin=subprocess.PIPE,
                                  stdout=subprocess.PIPE, text=True)
        try:
            bench = json.loads(server.stdout.readline())
            serials = ", ".join(f'"TM150-{n:04d}"' for n in range(1, options.devices + 1))
            (work / "batch.toml").write_text(SEQUENCE.format(serials=serials, points=options.points, ifbw=options.ifbw,
                                                             **bench), encoding="utf-8")
            wall, busy, sweeps, batch, devices = run_batch(work, options)
        finally:
            server.stdin.close()
            server.wait(timeout=30)
    sweep_s = options.points * (1 / options.ifbw + 20e-6) + 0.005
    print(f"batch: {devices} devices, {sweeps} sweeps of {options.points} points at "
          f"{options.ifbw:g} Hz IF bandwidth (~{sweep_s * 1e3:.0f} ms each)")
    print(f"wall time of the run       {wall:8.3f} s")
    print(f"simulator busy time        {busy:8.3f} s")
    print(f"ratio wall / busy          {wall / busy:8.3f}   (goal <= 1.05)")
    print(f"overhead per sweep         {(wall - busy) / sweeps * 1e3:8.2f} ms")
    print(f"the batch alone (after the first check): wall {batch[0]:.3f} s, busy {batch[1]:.3f} s, "
          f"ratio {batch[0] / batch[1]:.3f}")
    return 0


def run_batch(work: Path, options: argparse.Namespace) -> tuple[float, float, int, tuple[float, float], int]:
    """Run the sequence in ``work`` in this process; wall and busy times of the run and the batch."""
    spec = load_sequence(work / "batch.toml")
    view = QuietView()
    with open_station(spec, view.ask) as station, ResultStore(work / "results.sqlite") as store:
        run_folder = RunFolder(work, "run-bench")
        journal = RunJournal(run_folder.path)
        facts = _facts(spec, "run-bench", station, "benchmark")
        store.start_run({"run_id": "run-bench", "started_utc": "-", "status": "running", "sequence_name": spec.name,
                         "station": station.spec.name, "operator": "benchmark", "software_version": "-",
                         "analyzer": station.identity.describe(), "resource": station.identity.resource,
                         "sweep_plan": spec.plan.describe()})
        runner = StepRunner(spec, station, store, journal, run_folder, facts, view, StopSignal(), RunState())
        with BenchControlClient(spec.station.bench_control) as control, \
                BenchControlClient(spec.station.bench_control) as view_control:
            view.control = view_control
            busy_before = control.request("status")["busy_seconds"]
            start = time.perf_counter()
            runner.run()
            end = time.perf_counter()
            wall = end - start
            status = control.request("status")
        journal.close()
    busy = status["busy_seconds"] - busy_before
    assert view.batch_start is not None
    batch = (end - view.batch_start[0], status["busy_seconds"] - view.batch_start[1])
    return wall, busy, int(status["sweeps"]), batch, view.devices


if __name__ == "__main__":
    sys.exit(main())
