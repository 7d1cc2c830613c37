"""The instrument model of a simulated analyzer: hidden error terms, noise, what sits on
each port, and the sweep that turns the truth into raw receiver data.

Three models (``AnalyzerSimulationSettings.model``):

- ``reflection`` -- one port, S11 only (three-term model);
- ``forward`` -- two ports, one path: port 1 drives, port 2 only receives, so a sweep gives
  S11 and S21; the reverse parameters are measured by turning the device around;
- ``full`` -- two ports, both drive in turn: S11, S21 (forward) and S22, S12 (reverse), six
  terms per direction (the twelve-term model).

No transport here: :mod:`.scpi_analyzer` and :mod:`.serial_analyzer` serve this model.
Every public method takes the model's lock, because the servers and the bench control
channel run in different threads.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass

import numpy as np

from lineproof.simulators.drift import BenchEnvironment, Conditions, DriftSettings, DriftState, drift_state, drifted
from lineproof.simulators.error_model import (
    MODEL_DIRECTIONS,
    MODEL_PARAMETERS,
    AnalyzerErrorModel,
    DirectionTerms,
    OnePortTerms,
    PortErrorSettings,
    correct_one_port,
    correct_two_port,
    freeze,
)
from lineproof.simulators.noise import NoiseTable
from lineproof.simulators.objects import BenchObject
from lineproof.simulators.wiring import Attachment, PortWiring

#: Grids whose terms are kept (a run uses a handful: its sweep, the truth requests).
_CACHE_LIMIT = 16
#: Drift states whose terms and solved waves are kept (what matters is the current one, on
#: each grid in use; each entry holds several 10,001-point arrays).
_STATE_CACHE_LIMIT = 4


@dataclass(frozen=True)
class AnalyzerSimulationSettings:
    """What a scenario may set for one simulated analyzer."""

    identity: str = "Tarnmoor Instruments,SIM-R1 reflectometer (simulated),SIM0001,1.0"
    #: "reflection" (one port), "forward" (two-port, one path) or "full" (two-port).
    model: str = "reflection"
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
    #: Sweep time = points * (1/IFBW + per_point) + overhead per direction, times ``time_scale``.
    per_point_s: float = 20e-6
    sweep_overhead_s: float = 0.005
    time_scale: float = 0.0
    seed: int = 1
    #: Seeds what differs from one session at the bench to the next -- the connector draws
    #: and the trace noise -- while ``seed`` keeps the hidden hardware (None: from ``seed``).
    session_seed: int | None = None
    port_settings: tuple[PortErrorSettings, ...] = (PortErrorSettings(),)
    drift: DriftSettings = DriftSettings()
    #: Serve TRACe:DATA? CORRected from a calibration the instrument holds (made at bench
    #: start; reflection and full models only), with these residual errors.
    internal_correction: bool = False
    residual_directivity_db: float = -46.0
    residual_source_match_db: float = -40.0

    @property
    def parameters(self) -> tuple[str, ...]:
        return MODEL_PARAMETERS[self.model]

    @property
    def directions(self) -> tuple[str, ...]:
        return MODEL_DIRECTIONS[self.model]


def _scaled_plus(wave: np.ndarray, gain: float, offset: np.ndarray) -> np.ndarray:
    """gain · wave + offset, in as few passes as the gain allows."""
    if gain == 1.0:
        return np.add(wave, offset)
    out = np.multiply(wave, gain)
    return np.add(out, offset, out=out)


class SimulatedAnalyzer:
    """An analyzer model of any of the three kinds."""

    def __init__(self, settings: AnalyzerSimulationSettings, environment: BenchEnvironment | None = None) -> None:
        if settings.ports != (1 if settings.model == "reflection" else 2):
            raise ValueError(f"a {settings.model!r} analyzer cannot have {settings.ports} ports")
        if settings.internal_correction and settings.model == "forward":
            raise ValueError("a one-path analyzer cannot correct its own data (it never sees the reverse terms)")
        self.settings = settings
        self.environment = environment or BenchEnvironment()
        #: The conditions of the instrument's own calibration (internal correction).
        self.calibrated_at = self.environment.now()
        self.last_conditions = self.calibrated_at
        self.lock = threading.RLock()
        session = settings.seed if settings.session_seed is None else settings.session_seed
        self._connection_rng = np.random.default_rng(session + 1)
        self.error_model = AnalyzerErrorModel(settings.model, settings.port_settings, settings.seed)
        self.wiring = PortWiring(settings.ports)
        self.noise_enabled = True
        self.sweeps_done = 0
        self.busy_seconds = 0.0
        self._terms_cache: dict[tuple[float, float, int], dict[str, DirectionTerms]] = {}
        self._correction_cache: dict[tuple[float, float, int], dict[str, DirectionTerms]] = {}
        self._raw_cache: dict[tuple[object, ...], dict[str, tuple[np.ndarray, dict]]] = {}
        self._wave_cache: dict[tuple[object, ...], dict[str, tuple[np.ndarray, np.ndarray]]] = {}
        self._drifted_cache: dict[tuple[object, ...], dict[str, DirectionTerms]] = {}
        self._network_cache: dict[tuple[object, ...], np.ndarray] = {}
        self._noise_table = NoiseTable(session)
        self._grid_key: tuple[float, float, int] | None = None
        self._grid = np.empty(0)
        self._cable_delays = [m.settings.cable_delay_s for m in self.error_model.port_models]
        self.reset()

    # -- state ------------------------------------------------------------------------

    def reset(self) -> None:
        """Power-on state (IEEE 488.2 *RST): default sweep, no data."""
        with self.lock:
            self.start_hz = max(self.settings.frequency_min_hz, 100e6)
            self.stop_hz = min(self.settings.frequency_max_hz, 1e9)
            self.points = min(201, self.settings.max_points)
            self.if_bandwidth_hz = 1000.0
            self.power_dbm = 0.0
            self.parameter = "S11"
            self.traces: dict[str, np.ndarray] = {}
            self.trace_frequencies = np.empty(0)
            self.busy_until = 0.0
            self.last_sweep_s = 0.0

    def frequencies(self) -> np.ndarray:
        """The current sweep's grid (read-only; kept while the sweep settings stand)."""
        with self.lock:
            key = (self.start_hz, self.stop_hz, self.points)
            if self._grid_key != key:
                grid = np.linspace(self.start_hz, self.stop_hz, self.points)
                grid.setflags(write=False)
                self._grid, self._grid_key = grid, key
            return self._grid

    def sweep_duration_s(self) -> float:
        """Simulated duration of one sweep of every direction the model measures."""
        s = self.settings
        one_direction = self.points * (1.0 / self.if_bandwidth_hz + s.per_point_s) + s.sweep_overhead_s
        return one_direction * len(s.directions)

    # -- ports --------------------------------------------------------------------------

    def _check_port(self, port: int, what: str = "port") -> None:
        if not isinstance(port, int) or not 1 <= port <= self.settings.ports:
            raise ValueError(f"{what} {port!r} does not exist (the analyzer has {self.settings.ports} "
                             f"port{'s' if self.settings.ports > 1 else ''})")

    def connect(self, port: int, thing: BenchObject, output: BenchObject | None = None,
                output_port: int | None = None, reversed: bool = False,
                paths: dict[int, BenchObject] | None = None, repeatability: float | None = None,
                source: str = "operator") -> Attachment:
        """Put ``thing`` on ``port``.  A two-port's output sees ``output`` (a one-port) or
        analyzer port ``output_port``; ``reversed`` turns it around.  Every connector mated
        here gets a fresh random reflection of at most ``repeatability`` (the scenario's
        connection repeatability unless given)."""
        self._check_port(port)
        if thing.ports == 1 and (output is not None or output_port is not None or reversed):
            raise ValueError(f"{thing.name} is a one-port: it has no output to terminate or turn around")
        if thing.ports == 2:
            if (output is None) == (output_port is None):
                raise ValueError(f"{thing.name} is a two-port: say what its output goes to "
                                 f"(a termination or port:2), once")
            if output is not None and output.ports != 1:
                raise ValueError(f"{output.name} cannot terminate an output: it is not a one-port")
            if output_port is not None:
                self._check_port(output_port, "output port")
                if output_port == port:
                    raise ValueError("a two-port's output cannot go back to the port it is on")
        attachment = Attachment(thing, port, output, output_port, bool(reversed), paths=dict(paths or {}),
                                source=source)
        limit = self.settings.connection_repeatability if repeatability is None else repeatability
        with self.lock:
            for p in attachment.ports():
                rho = self._connection_rng.uniform(0, limit)
                phase = self._connection_rng.uniform(0, 2 * np.pi)
                attachment.links[p] = complex(rho * np.exp(1j * phase))
            self.wiring.attach(attachment)
        return attachment

    def disconnect(self, port: int) -> Attachment | None:
        self._check_port(port)
        with self.lock:
            return self.wiring.detach(port)

    def true_reflection(self, port: int, frequencies_hz: np.ndarray) -> np.ndarray:
        """The reflection a perfect analyzer would see at ``port``'s reference plane."""
        self._check_port(port)
        with self.lock:
            return self.wiring.reflection(port, np.asarray(frequencies_hz, dtype=float))

    def true_network(self, frequencies_hz: np.ndarray) -> np.ndarray:
        """The true S-parameters between the reference planes: (N, 2, 2) for a two-port
        analyzer, (N,) for a reflection analyzer."""
        f = np.asarray(frequencies_hz, dtype=float)
        with self.lock:
            return self._network(f)

    # -- error terms --------------------------------------------------------------------

    def _base_terms(self, f: np.ndarray) -> dict[str, DirectionTerms]:
        key = (float(f[0]), float(f[-1]), f.size)
        terms = self._terms_cache.get(key)
        if terms is None:
            terms = {d: freeze(t) for d, t in self.error_model.terms(f).items()}
            if len(self._terms_cache) >= _CACHE_LIMIT:
                self._terms_cache.clear()
            self._terms_cache[key] = terms
        return terms

    def direction_terms(self, frequencies_hz: np.ndarray,
                        conditions: Conditions | None = None) -> dict[str, DirectionTerms]:
        """The hidden terms of every direction the model sweeps, under ``conditions`` (bench
        time and temperature; default: now)."""
        f = np.asarray(frequencies_hz, dtype=float)
        with self.lock:
            return self._drifted_terms(f, self._drift_state(conditions or self.environment.now()))

    def _drift_state(self, conditions: Conditions) -> DriftState:
        return drift_state(self.settings.drift, self._cable_delays, conditions)

    def port_terms(self, port: int, frequencies_hz: np.ndarray,
                   conditions: Conditions | None = None) -> OnePortTerms:
        """The three one-port terms of ``port`` (those of the direction it drives)."""
        self._check_port(port)
        direction = "forward" if port == 1 else "reverse"
        terms = self.direction_terms(frequencies_hz, conditions)
        if direction not in terms:
            raise ValueError(f"port {port} of a {self.settings.model!r} analyzer never drives: it has no "
                             f"one-port terms (turn the device around and measure at port 1)")
        return terms[direction].one_port()

    # -- sweeping -------------------------------------------------------------------------

    def _noise(self, raw: np.ndarray, entry: dict[object, np.ndarray]) -> np.ndarray:
        """``raw`` plus receiver noise: a floor that grows as the square root of the IF
        bandwidth and falls with the source power, and a part proportional to the signal.
        The noise's standard deviation per point is kept in ``entry`` (with the raw trace)."""
        if not self.noise_enabled:
            return raw
        s = self.settings
        floor = 10 ** (s.noise_floor_db / 20) * np.sqrt(self.if_bandwidth_hz / 1e3) * 10 ** (-self.power_dbm / 20)
        sigma = entry.get(floor)
        if sigma is None:
            # half the noise power in each of the real and imaginary parts
            sigma = np.sqrt(0.5 * floor * floor + (0.5 * s.trace_noise**2) * (raw.real**2 + raw.imag**2))
            if len(entry) > 4:
                entry.clear()
            entry[floor] = sigma
        noisy = np.multiply(sigma, self._noise_table.draw(raw.size))
        return np.add(noisy, raw, out=noisy)

    def raw_traces(self, f: np.ndarray, conditions: Conditions | None = None) -> dict[str, np.ndarray]:
        """Noise-free raw traces of every parameter the model measures, on ``f`` under
        ``conditions`` (default: now)."""
        return {name: raw for name, (raw, _) in self._raw_entry(f, conditions or self.environment.now()).items()}

    def _raw_entry(self, f: np.ndarray, conditions: Conditions) -> dict[str, tuple[np.ndarray, dict]]:
        """Raw traces (each with a small cache of its noise levels), kept per grid while nothing is
        reconnected and the terms hold (the bench clock ticks in whole seconds), so a repeated sweep
        costs only its noise."""
        state = self._drift_state(conditions)
        key = (float(f[0]), float(f[-1]), f.size, self.wiring.generation, state)
        entry = self._raw_cache.get(key)
        if entry is None:
            entry = {}
            for name, raw in self._compute_raw(f, state).items():
                raw.setflags(write=False)
                entry[name] = (raw, {})
            if len(self._raw_cache) >= _CACHE_LIMIT:
                self._raw_cache.clear()
            self._raw_cache[key] = entry
        return entry

    def _drifted_terms(self, f: np.ndarray, state: DriftState) -> dict[str, DirectionTerms]:
        """The terms in drift ``state``, kept per grid and state (a reconnection needs a new
        solve, not new terms)."""
        key = (float(f[0]), float(f[-1]), f.size, state)
        terms = self._drifted_cache.get(key)
        if terms is None:
            terms = {d: freeze(t) for d, t in drifted(self._base_terms(f), f, state).items()}
            if len(self._drifted_cache) >= _STATE_CACHE_LIMIT:
                self._drifted_cache.clear()
            self._drifted_cache[key] = terms
        return terms

    def _network(self, f: np.ndarray) -> np.ndarray:
        """The true network between the planes ((N,) for a reflection analyzer), kept per grid
        until something is reconnected."""
        key = (float(f[0]), float(f[-1]), f.size, self.wiring.generation)
        network = self._network_cache.get(key)
        if network is None:
            network = self.wiring.reflection(1, f) if self.settings.ports == 1 else self.wiring.between_planes(f)
            network.setflags(write=False)
            if len(self._network_cache) >= _CACHE_LIMIT:
                self._network_cache.clear()
            self._network_cache[key] = network
        return network

    def _compute_raw(self, f: np.ndarray, state: DriftState) -> dict[str, np.ndarray]:
        """Raw = directivity + tracking · wave (and isolation + tracking · wave through).  The
        waves and the tracking's phase depend on the match terms and the cables' phase only;
        ``state.gain`` -- all that moves with the clock at a steady temperature -- scales them
        afterwards, so a tick of the clock costs two passes per trace, not a new solve."""
        traces = {}
        for direction, (directivity, reflected, transmitted) in self._waves(f, state).items():
            traces["S11" if direction == "forward" else "S22"] = _scaled_plus(reflected, state.gain, directivity)
            if transmitted is not None:
                isolation = self._base_terms(f)[direction].isolation
                traces["S21" if direction == "forward" else "S12"] = _scaled_plus(transmitted, state.gain, isolation)
        return {name: traces[name] for name in self.settings.parameters}

    def _waves(self, f: np.ndarray, state: DriftState) -> dict[str, tuple[np.ndarray, np.ndarray, np.ndarray | None]]:
        """Per direction: the drifted directivity, tracking · b1 and tracking · b2 without the
        gain drift (None on a reflection analyzer); kept per grid, wiring and drift of the
        match terms and cables."""
        unscaled = state.without_gain()
        key = (float(f[0]), float(f[-1]), f.size, self.wiring.generation, unscaled)
        waves = self._wave_cache.get(key)
        if waves is None:
            terms = self._drifted_terms(f, unscaled)
            network = self._network(f)
            waves = {}
            if self.settings.model == "reflection":
                t = terms["forward"]
                reflected = t.reflected_wave(network)
                waves["forward"] = (t.directivity, np.multiply(reflected, t.reflection_tracking, out=reflected), None)
            else:
                # the four parameters as contiguous arrays (a column of an (N, 2, 2) array is
                # read at a 64-byte stride); the reverse direction sees the network turned round
                s11, s12, s21, s22 = (np.ascontiguousarray(network[:, i, j]) for i in (0, 1) for j in (0, 1))
                for direction, t in terms.items():
                    b1, b2 = t.waves(s11, s12, s21, s22) if direction == "forward" else t.waves(s22, s21, s12, s11)
                    waves[direction] = (t.directivity, np.multiply(b1, t.reflection_tracking, out=b1),
                                        np.multiply(b2, t.transmission_tracking, out=b2))
            if len(self._wave_cache) >= _STATE_CACHE_LIMIT:
                self._wave_cache.clear()
            self._wave_cache[key] = waves
        return waves

    def sweep(self) -> float:
        """Take one sweep of every parameter; returns its simulated duration (s)."""
        with self.lock:
            f = self.frequencies()
            if self.start_hz > self.stop_hz:
                raise ValueError("the start frequency is above the stop frequency")
            self.last_conditions = self.environment.now()
            self.environment.sweep_taken()
            entry = self._raw_entry(f, self.last_conditions)
            self.traces = {name: self._noise(raw, levels) for name, (raw, levels) in entry.items()}
            self.trace_frequencies = f
            duration = self.sweep_duration_s()
            self.last_sweep_s = duration
            self.busy_until = time.monotonic() + duration * self.settings.time_scale
            self.sweeps_done += 1
            self.busy_seconds += duration * self.settings.time_scale
            return duration

    def corrected_trace(self, parameter: str) -> np.ndarray | None:
        """The last sweep of ``parameter`` corrected with the instrument's own calibration
        (None: no data yet).  ValueError when the model holds no calibration."""
        if not self.settings.internal_correction:
            raise ValueError("this analyzer holds no calibration of its own")
        with self.lock:
            if parameter not in self.traces:
                return None
            f = self.trace_frequencies
            terms = self._held_calibration(f)
            if self.settings.model == "reflection":
                return correct_one_port(self.traces["S11"], terms["forward"])
            return correct_two_port(self.traces, terms["forward"], terms["reverse"])[parameter]

    def _held_calibration(self, f: np.ndarray) -> dict[str, DirectionTerms]:
        """The terms the instrument measured when it was calibrated, off by its residuals."""
        key = (float(f[0]), float(f[-1]), f.size)
        held = self._correction_cache.get(key)
        if held is None:
            s = self.settings
            rng = np.random.default_rng(s.seed + 77)
            held = {}
            for direction, t in self.direction_terms(f, self.calibrated_at).items():
                turns = rng.uniform(0, 2 * np.pi, size=3)
                wobble = 2 * np.pi * f / rng.uniform(200e6, 600e6)
                held[direction] = freeze(DirectionTerms(
                    t.directivity + 10 ** (s.residual_directivity_db / 20) * np.exp(1j * (turns[0] + wobble)),
                    t.source_match + 10 ** (s.residual_source_match_db / 20) * np.exp(1j * (turns[1] - wobble)),
                    t.reflection_tracking, t.load_match + 10 ** (s.residual_source_match_db / 20)
                    * np.exp(1j * (turns[2] + 0.7 * wobble)), t.transmission_tracking, t.isolation))
            if len(self._correction_cache) >= _CACHE_LIMIT:
                self._correction_cache.clear()
            self._correction_cache[key] = held
        return held

    def wait_idle(self) -> None:
        """Block until the current sweep would have finished on real hardware."""
        delay = self.busy_until - time.monotonic()
        if delay > 0:
            time.sleep(delay)

    def idle(self) -> bool:
        """Whether the current sweep would have finished on real hardware."""
        return self.busy_until <= time.monotonic()
