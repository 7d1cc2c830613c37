"""A simulated SCPI switch matrix (PROTOCOLS.md §4) whose channels are wired to analyzer
ports and bench objects.

Closing a channel connects its object to its analyzer port through the channel's own path:
a short line with a little loss and a small fixed mismatch at each end (seeded, so the same
channel always looks the same: a switch path is repeatable, unlike a hand-made connection),
plus an optional tiny random contact reflection at each closure.  One closed channel per
analyzer port: a second is refused with -221 "Settings conflict" (break before make is the
caller's job, as with a real multiplexer).

Channel lists follow SCPI-1999 Vol 1 §8.3.2: ``(@1!3)`` module 1 channel 3, ``(@1!1:1!4)``
a range within a module, ``(@1!1,2!1)`` a list.
"""

from __future__ import annotations

import re
import threading
import time
from dataclasses import dataclass

import numpy as np

from lineproof.simulators import physics
from lineproof.simulators.analyzer_sim import SimulatedAnalyzer
from lineproof.simulators.faults import FaultPlan
from lineproof.simulators.objects import BenchObject
from lineproof.simulators.scpi import ScpiCommandError
from lineproof.simulators.scpi_server import ScpiFront

Channel = tuple[int, int]  # (module, channel)


@dataclass(frozen=True)
class SwitchChannelWiring:
    """What one channel connects: ``thing`` to ``port`` of ``analyzer``; a two-port's output to
    ``output`` (a one-port's name) or to analyzer port ``output_port`` (through the channel's
    second pole)."""

    channel: Channel
    analyzer: str
    port: int
    thing: str
    output: str | None = None
    output_port: int | None = None
    reversed: bool = False


@dataclass(frozen=True)
class SwitchSettings:
    """What a scenario may set for the switch matrix."""

    identity: str = "Tarnmoor Instruments,SIM-X24 switch matrix (simulated),SIMX001,1.0"
    modules: int = 2
    channels_per_module: int = 24
    #: |Γ| of each path's own fixed mismatch, at each end.
    path_mismatch: float = 0.001
    #: Insertion loss of a path at 1 GHz (dB); skin effect makes it grow as sqrt(f).
    path_loss_db: float = 0.05
    path_delay_s: float = 0.35e-9
    #: Spread (1-sigma) of the paths' delays about ``path_delay_s``.
    path_delay_spread_s: float = 1e-12
    #: Largest random contact reflection at each closure, at 1 GHz.
    repeatability: float = 0.0
    #: Relay settling time per operation (times the bench's time scale).
    settle_s: float = 0.012
    time_scale: float = 0.0
    seed: int = 1


def format_channel(channel: Channel) -> str:
    return f"{channel[0]}!{channel[1]}"


def parse_channel_list(text: str) -> list[Channel]:
    """``(@1!1:1!3,2!5)`` -> [(1,1), (1,2), (1,3), (2,5)] (SCPI-1999 Vol 1 §8.3.2)."""
    match = re.fullmatch(r"\s*\(@([^()]*)\)\s*", text)
    if not match or not match.group(1).strip():
        raise ScpiCommandError(-224, "Illegal parameter value")
    channels: list[Channel] = []
    for item in match.group(1).split(","):
        ends = [_channel(part) for part in item.split(":")]
        if len(ends) == 1:
            channels.append(ends[0])
        elif len(ends) == 2 and ends[0][0] == ends[1][0] and ends[0][1] <= ends[1][1]:
            channels += [(ends[0][0], c) for c in range(ends[0][1], ends[1][1] + 1)]
        else:  # a range runs upward within one module here
            raise ScpiCommandError(-224, "Illegal parameter value")
    return channels


def _channel(text: str) -> Channel:
    found = re.fullmatch(r"\s*(\d+)\s*!\s*(\d+)\s*", text)
    if not found:
        raise ScpiCommandError(-224, "Illegal parameter value")
    return int(found.group(1)), int(found.group(2))


def switch_path(name: str, settings: SwitchSettings, rng: np.random.Generator) -> BenchObject:
    """One channel's path: a fixed mismatch at each end of a short lossy line."""
    delay = max(1e-12, settings.path_delay_s + settings.path_delay_spread_s * rng.normal())
    # Small loss of a line: attenuation ≈ R / (2 Z0) nepers (Pozar §2.7), R = loss·τ at 1 GHz.
    loss_ohm_per_s = settings.path_loss_db / (20 / np.log(10)) * 2 * physics.Z_REF / delay
    ends = settings.path_mismatch * np.exp(1j * rng.uniform(0, 2 * np.pi, size=2))

    def response(f: np.ndarray) -> np.ndarray:
        line = physics.abcd_to_s(physics.line(f, physics.Z_REF, delay, loss_ohm_per_s))
        near = physics.connector_step(np.full(f.shape, ends[0]))
        far = physics.reverse_s(physics.connector_step(np.full(f.shape, ends[1])))
        return physics.cascade_s(physics.cascade_s(near, line), far)

    return BenchObject(name, 2, response, "switch path", f"switch path {name}")


class SimulatedSwitch:
    """The switch model: which channels are closed, and what closing one connects."""

    def __init__(self, settings: SwitchSettings, wiring: list[SwitchChannelWiring],
                 analyzers: dict[str, SimulatedAnalyzer], objects: dict[str, BenchObject]) -> None:
        self.settings = settings
        self.wiring = {w.channel: w for w in wiring}
        self.analyzers = analyzers
        self.objects = objects
        self.lock = threading.RLock()
        self.closed: list[Channel] = []
        self.busy_until = 0.0
        rng = np.random.default_rng(settings.seed)
        self._paths = {}
        for channel in sorted(self.wiring):
            label = format_channel(channel)
            self._paths[channel] = (switch_path(f"{label} pole 1", settings, rng),
                                    switch_path(f"{label} pole 2", settings, rng))

    def exists(self, channel: Channel) -> bool:
        return 1 <= channel[0] <= self.settings.modules and 1 <= channel[1] <= self.settings.channels_per_module

    def close(self, channels: list[Channel]) -> None:
        """Close every channel of the list, or none (SCPI error -222 / -221)."""
        with self.lock:
            if not all(self.exists(c) for c in channels):
                raise ScpiCommandError(-222, "Data out of range")
            taken = set().union(*(self._port_keys(c) for c in self.closed if c in self.wiring))
            for channel in channels:
                if channel in self.closed or channel not in self.wiring:
                    continue
                keys = self._port_keys(channel)
                if keys & taken:
                    raise ScpiCommandError(-221, "Settings conflict")
                taken |= keys
            for channel in channels:
                if channel not in self.closed:
                    self.closed.append(channel)
                    self._connect(channel)
            self._settle()

    def open(self, channels: list[Channel] | None = None) -> None:
        """Open the channels (all when None)."""
        with self.lock:
            if channels is not None and not all(self.exists(c) for c in channels):
                raise ScpiCommandError(-222, "Data out of range")
            for channel in list(self.closed) if channels is None else channels:
                if channel in self.closed:
                    self.closed.remove(channel)
                    self._disconnect(channel)
            self._settle()

    def is_closed(self, channel: Channel) -> bool:
        with self.lock:
            return channel in self.closed

    def wait_idle(self) -> None:
        delay = self.busy_until - time.monotonic()
        if delay > 0:
            time.sleep(delay)

    def idle(self) -> bool:
        return self.busy_until <= time.monotonic()

    # -- wiring ---------------------------------------------------------------------------------

    def _port_keys(self, channel: Channel) -> set[tuple[str, int]]:
        wiring = self.wiring[channel]
        keys = {(wiring.analyzer, wiring.port)}
        if wiring.output_port is not None:
            keys.add((wiring.analyzer, wiring.output_port))
        return keys

    def _connect(self, channel: Channel) -> None:
        wiring = self.wiring.get(channel)
        if wiring is None:
            return  # an unwired channel closes and connects nothing
        near, far = self._paths[channel]
        paths = {wiring.port: near}
        if wiring.output_port is not None:
            paths[wiring.output_port] = far
        output = self.objects[wiring.output] if wiring.output else None
        self.analyzers[wiring.analyzer].connect(
            wiring.port, self.objects[wiring.thing], output, wiring.output_port, wiring.reversed,
            paths=paths, repeatability=self.settings.repeatability, source=f"switch {format_channel(channel)}")

    def _disconnect(self, channel: Channel) -> None:
        wiring = self.wiring.get(channel)
        if wiring is None:
            return
        analyzer = self.analyzers[wiring.analyzer]
        with analyzer.lock:
            attachment = analyzer.wiring.attachment(wiring.port)
            # Only what this channel connected: an operator may have connected something else since.
            if attachment is not None and attachment.source == f"switch {format_channel(channel)}":
                analyzer.disconnect(wiring.port)

    def _settle(self) -> None:
        self.busy_until = time.monotonic() + self.settings.settle_s * self.settings.time_scale

    def describe(self) -> dict[str, object]:
        with self.lock:
            return {
                "closed": [format_channel(c) for c in self.closed],
                "channels": [{"channel": format_channel(w.channel), "analyzer": w.analyzer, "port": w.port,
                              "object": w.thing, "output": w.output if w.output_port is None else f"port:{w.output_port}",
                              "reversed": w.reversed} for w in self.wiring.values()],
            }


class SwitchScpiFront(ScpiFront):
    """The SCPI face of the switch: ROUTe:CLOSe, ROUTe:OPEN[:ALL], ROUTe:CLOSe? (PROTOCOLS.md §4)."""

    def __init__(self, switch: SimulatedSwitch, faults: FaultPlan | None = None) -> None:
        self.switch = switch
        super().__init__(switch.settings.identity, faults)
        add = self.dispatcher.add
        add("ROUTe:CLOSe", lambda args, sfx: switch.close(parse_channel_list(args)))
        add("ROUTe:CLOSe?", lambda args, sfx: self._closed_query(args))
        add("ROUTe:OPEN", lambda args, sfx: switch.open(parse_channel_list(args)))
        add("ROUTe:OPEN:ALL", lambda args, sfx: switch.open())

    def _closed_query(self, args: str) -> str:
        channels = parse_channel_list(args)
        if not all(self.switch.exists(c) for c in channels):
            raise ScpiCommandError(-222, "Data out of range")
        return ",".join("1" if self.switch.is_closed(c) else "0" for c in channels)

    def reset(self) -> None:
        self.switch.open()

    def wait_idle(self) -> None:
        self.switch.wait_idle()

    def idle(self) -> bool:
        return self.switch.idle()
