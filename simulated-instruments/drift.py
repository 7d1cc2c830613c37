"""Slow change of the hidden error terms: with the bench temperature and with elapsed time.

The bench has one clock and one temperature (:class:`BenchEnvironment`), shared by its
instruments.  The clock runs at ``clock_rate`` bench seconds per real second (0: it moves only
when the control channel advances it, so that a test is repeatable), and moves on by
``seconds_per_sweep`` at every sweep (a batch then drifts with its progress, at any host
speed); the temperature follows
the scenario's profile (bench seconds, °C; linear between points, held outside them) until the
control channel sets it.

What drifts (:class:`DriftSettings`, all zero unless a scenario sets them): the magnitude of
the tracking terms (receiver gain, cable loss), the magnitude of the directivity and match
terms (and of the directivity alone), and the electrical length of each test-port cable (its phase), per kelvin away from the
reference temperature and per hour of bench time.  The phase effect of a cable's length is a
fact of the trade (a flexible test-port cable changes its electrical length with temperature
by some tens of ppm per kelvin; from memory).
"""

from __future__ import annotations

import threading
import time
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from lineproof.simulators.error_model import DirectionTerms


@dataclass(frozen=True)
class DriftSettings:
    """How an analyzer's terms drift (zero: they do not)."""

    reference_temperature_c: float = 23.0
    #: Relative change of the tracking terms' magnitude per kelvin.
    tracking_per_k: float = 0.0
    #: Relative change of the directivity and match terms' magnitude per kelvin.
    match_per_k: float = 0.0
    #: Further relative change of the directivity alone per kelvin (a bridge whose balance
    #: moves with temperature).
    directivity_per_k: float = 0.0
    #: Change of each test-port cable's electrical length per kelvin (ppm of its delay).
    cable_delay_ppm_per_k: float = 0.0
    #: Relative change of the tracking terms' magnitude per hour of bench time.
    tracking_per_hour: float = 0.0
    #: Change of each test-port cable's delay per hour of bench time (s).
    delay_per_hour_s: float = 0.0

    def is_still(self) -> bool:
        return not any((self.tracking_per_k, self.match_per_k, self.directivity_per_k, self.cable_delay_ppm_per_k,
                        self.tracking_per_hour, self.delay_per_hour_s))


@dataclass(frozen=True)
class Conditions:
    """The bench's clock and temperature at one moment."""

    seconds: float
    temperature_c: float


class TemperatureProfile:
    """Temperature over bench time: linear between (seconds, °C) points, held outside."""

    def __init__(self, points: Sequence[tuple[float, float]]) -> None:
        if not points:
            raise ValueError("a temperature profile needs at least one (seconds, °C) point")
        times = [float(t) for t, _ in points]
        if any(later <= earlier for earlier, later in zip(times, times[1:], strict=False)):
            raise ValueError("the profile's times must increase")
        self.times = np.array(times)
        self.temperatures = np.array([float(c) for _, c in points])

    def at(self, seconds: float) -> float:
        return float(np.interp(seconds, self.times, self.temperatures))


class BenchEnvironment:
    """The bench clock and temperature (thread-safe).  The clock reads in whole seconds
    (``TICKS_PER_SECOND``): the terms drift far too slowly to change within one (parts in
    10^7 at the drift rates of real analyzers), and a bench whose conditions hold can keep
    what it computed."""

    TICKS_PER_SECOND = 1

    def __init__(self, temperature_c: float = 23.0, profile: TemperatureProfile | None = None,
                 clock_rate: float = 1.0, seconds_per_sweep: float = 0.0) -> None:
        self._lock = threading.Lock()
        self._started = time.monotonic()
        self._advanced = 0.0
        self.clock_rate = clock_rate
        #: Bench seconds each sweep moves the clock on (the handling around a sweep on a real
        #: bench), so that a batch's drift follows its progress whatever the host's speed.
        self.seconds_per_sweep = seconds_per_sweep
        self.profile = profile
        self._held: float | None = None if profile is not None else temperature_c

    def seconds(self) -> float:
        with self._lock:
            exact = (time.monotonic() - self._started) * self.clock_rate + self._advanced
        return round(exact * self.TICKS_PER_SECOND) / self.TICKS_PER_SECOND

    def advance(self, seconds: float) -> None:
        """Move the bench clock forward (the temperature profile and time drift follow)."""
        with self._lock:
            self._advanced += seconds

    def sweep_taken(self) -> None:
        """A sweep was taken: the clock moves on by ``seconds_per_sweep``."""
        if self.seconds_per_sweep:
            self.advance(self.seconds_per_sweep)

    def set_temperature(self, temperature_c: float) -> None:
        """Hold the bench at ``temperature_c`` from now on (the profile no longer applies)."""
        with self._lock:
            self._held = temperature_c

    def now(self) -> Conditions:
        seconds = self.seconds()
        with self._lock:
            held = self._held
        return Conditions(seconds, held if held is not None else self.profile.at(seconds))


@dataclass(frozen=True)
class DriftState:
    """How far the terms have drifted under some conditions: the relative magnitude of the
    tracking terms (``gain``), of the directivity and match terms (``match``), of the
    directivity alone on top (``directivity``), and each test-port cable's extra one-way
    delay (``delays_s``, s).  Conditions with equal states give equal terms, so what is
    computed from the terms can be kept per state; and ``gain`` is the only part that moves
    with time alone at a steady temperature (unless a cable's delay drifts with time)."""

    gain: float = 1.0
    match: float = 1.0
    directivity: float = 1.0
    delays_s: tuple[float, ...] = ()

    def phases(self, frequencies_hz: np.ndarray) -> list[np.ndarray | None]:
        """Each port's one-way phase factor exp(-jωτ) (None where τ = 0: a factor of one)."""
        w = 2 * np.pi * np.asarray(frequencies_hz, dtype=float)
        return [np.exp(-1j * w * delay) if delay else None for delay in self.delays_s]

    def without_gain(self) -> DriftState:
        return DriftState(1.0, self.match, self.directivity, self.delays_s)


STILL = DriftState()


def drift_state(settings: DriftSettings, cable_delays_s: Sequence[float], conditions: Conditions) -> DriftState:
    """The drift of an analyzer's terms under ``conditions``."""
    if settings.is_still():
        return STILL
    delta_k = conditions.temperature_c - settings.reference_temperature_c
    hours = conditions.seconds / 3600.0
    delays = tuple(d * settings.cable_delay_ppm_per_k * 1e-6 * delta_k + settings.delay_per_hour_s * hours
                   for d in cable_delays_s)
    return DriftState(gain=1.0 + settings.tracking_per_k * delta_k + settings.tracking_per_hour * hours,
                      match=1.0 + settings.match_per_k * delta_k,
                      directivity=1.0 + settings.directivity_per_k * delta_k,
                      delays_s=delays if any(delays) else ())


def drifted(terms: dict[str, DirectionTerms], frequencies_hz: np.ndarray,
            state: DriftState) -> dict[str, DirectionTerms]:
    """``terms`` as they are in the drift ``state``."""
    if state == STILL:
        return terms
    one_way = state.phases(frequencies_hz) or [None]
    result = {}
    for direction, t in terms.items():
        drive, receive = (one_way[0], one_way[-1]) if direction == "forward" else (one_way[-1], one_way[0])
        round_trip = _product(drive, drive)
        result[direction] = t.scaled(
            directivity=state.match * state.directivity,
            source_match=state.match * round_trip,
            reflection_tracking=state.gain * round_trip,
            load_match=state.match * _product(receive, receive),
            transmission_tracking=state.gain * _product(drive, receive),
        )
    return result


def _product(first: np.ndarray | None, second: np.ndarray | None) -> np.ndarray | float:
    """The product of two phase factors, None being one."""
    if first is None or second is None:
        return 1.0 if first is None and second is None else first if second is None else second
    return first * second
