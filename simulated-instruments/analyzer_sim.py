"""The instrument model of a simulated analyzer: hidden error terms, noise, what sits on
each port, and the sweep that turns the truth into raw receiver data.

No transport here: :mod:`.scpi_analyzer` serves this model over TCP.  Every public method
takes the model's lock, because the SCPI server and the bench control channel run in
different threads.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, field

import numpy as np

from lineproof.simulators import physics
from lineproof.simulators.error_model import OnePortTerms, PortErrorModel, PortErrorSettings
from lineproof.simulators.objects import BenchObject


@dataclass(frozen=True)
class AnalyzerSimulationSettings:
    """What a scenario may set for one simulated analyzer."""

    identity: str = "Tarnmoor Instruments,SIM-R1 reflectometer (simulated),SIM0001,1.0"
    ports: int = 1
    frequency_min_hz: float = 1e6
    frequency_max_hz: float = 3e9
    max_points: int = 10001
    #: Receiver noise floor at 1 kHz IF bandwidth and 0 dBm source power, as |Γ| (dB).
    noise_floor_db: float = -90.0
    #: High-level trace noise, relative to the measured raw value (1-sigma).
    trace_noise: float = 2e-5
    #: Largest random reflection added at each (re)connection of a connector, at 1 GHz.
    connection_repeatability: float = 0.0
    #: Sweep time = points * (1/IFBW + per_point) + overhead, times ``time_scale``.
    per_point_s: float = 20e-6
    sweep_overhead_s: float = 0.005
    time_scale: float = 0.0
    seed: int = 1
    port_settings: tuple[PortErrorSettings, ...] = (PortErrorSettings(),)


@dataclass
class Connection:
    """What an operator (or a switch) connected to a port."""

    thing: BenchObject
    output: BenchObject | None
    connection_reflection: complex
    connected_at: float = field(default_factory=time.monotonic)


class SimulatedAnalyzer:
    """A reflection (one-port) analyzer model; two-port models extend it."""

    def __init__(self, settings: AnalyzerSimulationSettings) -> None:
        self.settings = settings
        self.lock = threading.RLock()
        self._rng = np.random.default_rng(settings.seed)
        self._connection_rng = np.random.default_rng(settings.seed + 1)
        self.port_models = [
            PortErrorModel(port, settings.seed * 100 + index)
            for index, port in enumerate(settings.port_settings)
        ]
        self.noise_enabled = True
        self.connections: dict[int, Connection] = {}
        self._terms_cache: dict[tuple[int, float, float, int], OnePortTerms] = {}
        self.reset()

    # -- state ------------------------------------------------------------------------

    def reset(self) -> None:
        """Power-on state (IEEE 488.2 *RST): default sweep, no data."""
        with self.lock:
            self.start_hz = max(self.settings.frequency_min_hz, 100e6)
            self.stop_hz = min(self.settings.frequency_max_hz, 1e9)
            self.points = 201
            self.if_bandwidth_hz = 1000.0
            self.power_dbm = 0.0
            self.parameter = "S11"
            self.traces: dict[str, np.ndarray] = {}
            self.trace_frequencies = np.empty(0)
            self.busy_until = 0.0
            self.sweeps_done = 0
            self.busy_seconds = 0.0

    def frequencies(self) -> np.ndarray:
        with self.lock:
            return np.linspace(self.start_hz, self.stop_hz, self.points)

    def sweep_duration_s(self) -> float:
        s = self.settings
        return self.points * (1.0 / self.if_bandwidth_hz + s.per_point_s) + s.sweep_overhead_s

    # -- ports --------------------------------------------------------------------------

    def connect(self, port: int, thing: BenchObject, output: BenchObject | None = None) -> None:
        """Put ``thing`` on ``port``; a two-port's output sees ``output`` (None = open end
        is refused: a two-port needs something on its output)."""
        if port < 1 or port > self.settings.ports:
            raise ValueError(f"port {port} does not exist (the analyzer has {self.settings.ports})")
        if thing.ports == 2 and output is None:
            raise ValueError(f"{thing.name} is a two-port: say what terminates its output")
        if thing.ports == 1 and output is not None:
            raise ValueError(f"{thing.name} is a one-port: it has no output to terminate")
        if output is not None and output.ports != 1:
            raise ValueError(f"{output.name} cannot terminate an output: it is not a one-port")
        with self.lock:
            rho = self._connection_rng.uniform(0, self.settings.connection_repeatability)
            phase = self._connection_rng.uniform(0, 2 * np.pi)
            self.connections[port] = Connection(thing, output, complex(rho * np.exp(1j * phase)))

    def disconnect(self, port: int) -> None:
        with self.lock:
            self.connections.pop(port, None)

    def true_reflection(self, port: int, frequencies_hz: np.ndarray) -> np.ndarray:
        """The reflection a perfect analyzer would see at ``port``'s reference plane."""
        with self.lock:
            connection = self.connections.get(port)
        f = np.asarray(frequencies_hz, dtype=float)
        if connection is None:
            return np.ones(f.shape, dtype=complex)  # an open test port
        gamma = connection.thing.response(f)
        if connection.thing.ports == 2:
            gamma = physics.terminated_input(gamma, connection.output.response(f))
        c = connection.connection_reflection * (f / 1e9)
        if np.any(c):
            # A connector interface as a small symmetric step: S11 = c, S22 = -c, S21 S12 = 1 - c².
            gamma = c + (1 - c * c) * gamma / (1 + c * gamma)
        return gamma

    def port_terms(self, port: int, frequencies_hz: np.ndarray) -> OnePortTerms:
        f = np.asarray(frequencies_hz, dtype=float)
        key = (port, float(f[0]), float(f[-1]), f.size)
        terms = self._terms_cache.get(key)
        if terms is None:
            terms = self.port_models[port - 1].terms(f)
            if len(self._terms_cache) > 16:
                self._terms_cache.clear()
            self._terms_cache[key] = terms
        return terms

    # -- sweeping -------------------------------------------------------------------------

    def _noise(self, raw: np.ndarray) -> np.ndarray:
        if not self.noise_enabled:
            return raw
        s = self.settings
        floor = 10 ** (s.noise_floor_db / 20) * np.sqrt(self.if_bandwidth_hz / 1e3) * 10 ** (-self.power_dbm / 20)
        sigma = np.hypot(floor, s.trace_noise * np.abs(raw)) / np.sqrt(2)
        noise = self._rng.standard_normal((2, raw.size))
        return raw + sigma * (noise[0] + 1j * noise[1])

    def sweep(self) -> float:
        """Take one sweep of every parameter; returns its simulated duration (s)."""
        with self.lock:
            f = self.frequencies()
            traces = {}
            for port in range(1, self.settings.ports + 1):
                gamma = self.true_reflection(port, f)
                traces[f"S{port}{port}"] = self._noise(self.port_terms(port, f).apply(gamma))
            self.traces = traces
            self.trace_frequencies = f
            duration = self.sweep_duration_s()
            self.busy_until = time.monotonic() + duration * self.settings.time_scale
            self.sweeps_done += 1
            self.busy_seconds += duration * self.settings.time_scale
            return duration

    def wait_idle(self) -> None:
        """Block until the current sweep would have finished on real hardware."""
        delay = self.busy_until - time.monotonic()
        if delay > 0:
            time.sleep(delay)
