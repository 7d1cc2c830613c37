"""Things that can sit on a simulated analyzer port: calibration standards as they *actually*
are, terminations, check standards, inline devices from circuit elements, and any 1-port or
2-port object given as a Touchstone file.

Each object answers its true S-parameters on any grid: shape (N,) for a one-port,
(N, 2, 2) for a two-port.  Results are cached per grid, so a sweep repeated on the same
grid costs nothing here.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from lineproof.simulators import physics

ResponseFunction = Callable[[np.ndarray], np.ndarray]


@dataclass(eq=False)
class BenchObject:
    """A named one-port or two-port with a response function of frequency."""

    name: str
    ports: int
    response_function: ResponseFunction
    kind: str = "object"
    description: str = ""
    _cache: dict[tuple[float, float, int], np.ndarray] = field(default_factory=dict, repr=False)

    def response(self, frequencies_hz: np.ndarray) -> np.ndarray:
        f = np.asarray(frequencies_hz, dtype=float)
        key = (float(f[0]), float(f[-1]), f.size)
        cached = self._cache.get(key)
        if cached is None:
            cached = np.asarray(self.response_function(f), dtype=complex)
            cached.setflags(write=False)
            if len(self._cache) > 16:
                self._cache.clear()
            self._cache[key] = cached
        return cached


# -- elements and ladders ------------------------------------------------------------------

ELEMENT_KINDS = ("series_inductor", "series_resistor", "series_capacitor", "shunt_capacitor",
                 "shunt_inductor", "shunt_resistor", "line")


def element_abcd(element: dict[str, Any], f: np.ndarray) -> np.ndarray:
    """ABCD of one circuit element described by a small table (see ELEMENT_KINDS)."""
    w = 2 * np.pi * f
    kind = element["element"]
    if kind == "series_inductor":
        return physics.series_impedance(1j * w * element["henry"])
    if kind == "series_resistor":
        return physics.series_impedance(np.full(f.shape, element["ohm"], dtype=complex))
    if kind == "series_capacitor":
        return physics.series_impedance(1 / (1j * w * element["farad"]))
    if kind == "shunt_capacitor":
        return physics.shunt_admittance(1j * w * element["farad"])
    if kind == "shunt_inductor":
        return physics.shunt_admittance(1 / (1j * w * element["henry"]))
    if kind == "shunt_resistor":
        return physics.shunt_admittance(np.full(f.shape, 1 / element["ohm"], dtype=complex))
    if kind == "line":
        return physics.line(f, element["ohm"], element["delay_s"], element.get("loss_ohm_per_s", 0.0))
    raise ValueError(f"unknown circuit element {kind!r}; use one of {', '.join(ELEMENT_KINDS)}")


def ladder_s(elements: Sequence[dict[str, Any]], f: np.ndarray, z0: float = physics.Z_REF) -> np.ndarray:
    """S-parameters (N, 2, 2) of a cascade of elements."""
    abcd = physics.cascade(*(element_abcd(e, f) for e in elements))
    return physics.abcd_to_s(abcd, z0)


def two_port_from_elements(name: str, elements: Sequence[dict[str, Any]], kind: str = "device",
                           description: str = "") -> BenchObject:
    frozen = [dict(e) for e in elements]
    return BenchObject(name, 2, lambda f: ladder_s(frozen, f), kind, description)


def thru(name: str, delay_s: float = 0.0, loss_ohm_per_s: float = 0.0, impedance_ohm: float = physics.Z_REF,
         description: str = "") -> BenchObject:
    """A thru standard: a flush thru (delay 0) or a short lossy line."""
    return BenchObject(name, 2, lambda f: physics.abcd_to_s(physics.line(f, impedance_ohm, delay_s, loss_ohm_per_s)),
                       "thru", description or ("flush thru" if delay_s == 0 else f"thru line of {delay_s * 1e12:g} ps"))


# -- terminations and standards ------------------------------------------------------------

def termination(name: str, resistance_ohm: float, series_inductance_h: float = 0.0,
                shunt_capacitance_f: float = 0.0, kind: str = "termination",
                description: str = "") -> BenchObject:
    """A resistor with its parasitic series inductance and shunt capacitance."""

    def gamma(f: np.ndarray) -> np.ndarray:
        w = 2 * np.pi * f
        z = resistance_ohm + 1j * w * series_inductance_h
        if shunt_capacitance_f:
            z = 1 / (1 / z + 1j * w * shunt_capacitance_f)
        return physics.load_reflection(z)

    return BenchObject(name, 1, gamma, kind, description)


def offset_standard(name: str, f_terminal: Callable[[np.ndarray], np.ndarray | None],
                    offset_impedance_ohm: float, offset_delay_s: float,
                    offset_loss_ohm_per_s: float, z0: float, kind: str) -> BenchObject:
    """A standard as physics has it: a lossy offset line (telegrapher's equations, series
    resistance growing as sqrt(f)) ended in a terminal impedance (None = open)."""

    def gamma(f: np.ndarray) -> np.ndarray:
        abcd = physics.line(f, offset_impedance_ohm, offset_delay_s, offset_loss_ohm_per_s)
        return physics.terminate_abcd_open(abcd, f_terminal(f), z0)

    return BenchObject(name, 1, gamma, kind)


def reflection_from_polar(name: str, magnitude: float, phase_rad: float, delay_s: float,
                          kind: str = "load") -> BenchObject:
    """A small reflection of fixed magnitude whose phase turns with a delay (a real load)."""
    return BenchObject(
        name, 1, lambda f: magnitude * np.exp(1j * (phase_rad - 4 * np.pi * f * delay_s)), kind
    )


def terminated(two_port: BenchObject, resistance_ohm: float) -> BenchObject:
    """A two-port ended in a resistor, seen as a one-port (e.g. a mismatched line section
    on a load: a check standard)."""
    gamma_end = complex(physics.load_reflection(resistance_ohm))
    return BenchObject(two_port.name, 1,
                       lambda f: physics.terminated_input(two_port.response(f), np.full(f.shape, gamma_end)),
                       two_port.kind, two_port.description)


def touchstone_object(name: str, path: str, kind: str = "object", description: str = "") -> BenchObject:
    """Any 1-port or 2-port from a Touchstone file, interpolated (linear in real and
    imaginary parts) onto the swept grid; frequencies outside the file are refused."""
    import skrf

    network = skrf.Network(path)
    if network.nports not in (1, 2):
        raise ValueError(f"{path}: only 1-port and 2-port Touchstone objects can sit on a port")
    known_f = network.f
    data = network.s

    def response(f: np.ndarray) -> np.ndarray:
        if f[0] < known_f[0] * (1 - 1e-12) or f[-1] > known_f[-1] * (1 + 1e-12):
            raise ValueError(
                f"{path} covers {known_f[0]:.6g}-{known_f[-1]:.6g} Hz; the sweep asks "
                f"{f[0]:.6g}-{f[-1]:.6g} Hz"
            )
        out = np.empty((f.size,) + data.shape[1:], dtype=complex)
        for i in range(data.shape[1]):
            for j in range(data.shape[2]):
                out[:, i, j] = np.interp(f, known_f, data[:, i, j].real) + 1j * np.interp(
                    f, known_f, data[:, i, j].imag
                )
        return out[:, 0, 0] if network.nports == 1 else out

    return BenchObject(name, network.nports, response, kind, description or f"Touchstone file {path}")
