"""What sits on each port of a simulated analyzer, and the network it forms between the
analyzer's reference planes.

A one-port sits on one port.  A two-port sits on one port with its output on a one-port
termination, or joins two ports (its output on the other port).  Each mating at an analyzer
port adds a small random reflection (connector repeatability; the joint between a device's
output and its termination is taken as perfect); an object reached through a switch channel
sits behind that channel's own fixed path.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from lineproof.simulators import physics
from lineproof.simulators.objects import BenchObject


@dataclass
class Attachment:
    """One thing connected to the analyzer.

    ``input_port`` faces the object's port 1 (its port 2 when ``reversed``).  A two-port's
    output faces either ``output`` (a one-port) or ``output_port``.  ``links`` holds the
    connector reflection at each analyzer-side interface, at 1 GHz (it grows in proportion
    to frequency); ``paths`` the fixed switch path between an analyzer port and the object.
    """

    thing: BenchObject
    input_port: int
    output: BenchObject | None = None
    output_port: int | None = None
    reversed: bool = False
    links: dict[int, complex] = field(default_factory=dict)
    paths: dict[int, BenchObject] = field(default_factory=dict)
    source: str = "operator"
    connected_at: float = field(default_factory=time.monotonic)

    def ports(self) -> tuple[int, ...]:
        return (self.input_port,) if self.output_port is None else (self.input_port, self.output_port)


def _interface(attachment: Attachment, port: int, f: np.ndarray) -> np.ndarray | None:
    """The two-port between analyzer port ``port`` and the object (None: nothing there)."""
    parts = []
    link = attachment.links.get(port, 0j)
    if link:
        parts.append(physics.connector_step(link * (f / 1e9)))
    path = attachment.paths.get(port)
    if path is not None:
        parts.append(path.response(f))
    if not parts:
        return None
    return parts[0] if len(parts) == 1 else physics.cascade_s(parts[0], parts[1])


def _behind(attachment: Attachment, port: int, f: np.ndarray, gamma: np.ndarray) -> np.ndarray:
    """``gamma`` as port ``port`` sees it through the interface of :func:`_interface`."""
    if attachment.paths.get(port) is None:  # at most a connector: its closed form
        link = attachment.links.get(port, 0j)
        return physics.behind_connector(link * (f / 1e9), gamma) if link else gamma
    return physics.terminated_input(_interface(attachment, port, f), gamma)


class PortWiring:
    """The attachments of one analyzer, keyed by every port each occupies."""

    def __init__(self, ports: int) -> None:
        self.ports = ports
        self._by_port: dict[int, Attachment] = {}
        #: Counts changes, so that what is computed from the wiring can be cached.
        self.generation = 0

    def attachment(self, port: int) -> Attachment | None:
        return self._by_port.get(port)

    def attach(self, attachment: Attachment) -> list[Attachment]:
        """Connect ``attachment``; whatever occupied its ports is removed (and returned)."""
        removed = []
        for port in attachment.ports():
            old = self._by_port.get(port)
            if old is not None and old not in removed:
                removed.append(old)
        for old in removed:
            self.detach(old.input_port)
        for port in attachment.ports():
            self._by_port[port] = attachment
        self.generation += 1
        return removed

    def detach(self, port: int) -> Attachment | None:
        old = self._by_port.get(port)
        if old is not None:
            for p in old.ports():
                self._by_port.pop(p, None)
            self.generation += 1
        return old

    def oriented_object(self, attachment: Attachment, f: np.ndarray) -> np.ndarray:
        """The object's S-parameters with index 0 facing ``input_port``."""
        s = attachment.thing.response(f)
        return physics.reverse_s(s) if attachment.reversed else s

    def reflection(self, port: int, f: np.ndarray) -> np.ndarray:
        """The true reflection at ``port``'s reference plane.  For a two-port joining two
        ports, the reflection with a perfect match at the other plane."""
        attachment = self._by_port.get(port)
        if attachment is None:
            return np.ones(f.shape, dtype=complex)  # an open test port
        if attachment.output_port is not None:
            joined = self.joined_network(attachment, f)
            return joined[:, 0, 0] if port == attachment.input_port else joined[:, 1, 1]
        if attachment.thing.ports == 1:
            gamma = attachment.thing.response(f)
        else:
            gamma = physics.terminated_input(self.oriented_object(attachment, f), attachment.output.response(f))
        return _behind(attachment, port, f, gamma)

    def joined_network(self, attachment: Attachment, f: np.ndarray) -> np.ndarray:
        """S (N, 2, 2) from ``input_port``'s plane to ``output_port``'s plane."""
        network = self.oriented_object(attachment, f)
        front = _interface(attachment, attachment.input_port, f)
        back = _interface(attachment, attachment.output_port, f)
        if front is not None:
            network = physics.cascade_s(front, network)
        if back is not None:
            network = physics.cascade_s(network, physics.reverse_s(back))
        return network

    def between_planes(self, f: np.ndarray) -> np.ndarray:
        """The two-port network between the planes of ports 1 and 2 (port 1 first)."""
        attachment = self._by_port.get(1)
        if attachment is not None and attachment.output_port is not None:
            network = self.joined_network(attachment, f)
            return network if attachment.input_port == 1 else physics.reverse_s(network)
        gamma_2 = self.reflection(2, f) if self.ports >= 2 else np.zeros(f.shape, dtype=complex)
        return physics.diagonal_s(self.reflection(1, f), gamma_2)
