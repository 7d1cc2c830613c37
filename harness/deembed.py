"""De-embedding: removing an adapter (a barrel, a cable, a connector-type change) that sits
between a calibrated reference plane and the device.

An adapter is a two-port whose port 1 faces the analyzer and port 2 the device; it comes
from a Touchstone file (renormalised to the system impedance, moved onto the sweep grid only
when the interpolation's own error estimate allows) or from an electrical length (a line of
given delay, loss and impedance: the AN 1287-11 line model of :mod:`lineproof.calkit`).

One-port data: Γm = a11 + a21 a12 Γ / (1 - a22 Γ), solved for Γ like a one-port correction.
Two-port data: with transfer matrices [b1, a1]ᵀ = T [a2, b2]ᵀ the measured cascade is
T = T_A T_device T_B, so T_device = T_A⁻¹ T T_B⁻¹ (the output adapter B with its port 1 at
the device).  The tests hold both against scikit-rf's cascading.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from lineproof.calibration import correct_reflection, same_grid
from lineproof.calkit import StandardDefinition, thru_s
from lineproof.errors import CalibrationError, InputError
from lineproof.resample import resample
from lineproof.two_port import flipped

#: Speed of light in vacuum, m/s (exact, SI).
SPEED_OF_LIGHT = 299_792_458.0
#: Largest error the interpolation of an adapter's data may add.
ADAPTER_INTERPOLATION_TOLERANCE = 1e-4


@dataclass(frozen=True, eq=False)
class Adapter:
    """An adapter's S-parameters (N, 2, 2) on a sweep grid; port 1 faces the analyzer."""

    name: str
    frequencies_hz: np.ndarray
    s: np.ndarray

    def check_grid(self, frequencies_hz: np.ndarray) -> None:
        if not same_grid(np.asarray(frequencies_hz, dtype=float), self.frequencies_hz):
            raise CalibrationError(f"adapter {self.name} is defined on another grid than this sweep; "
                                   "build it for the sweep's frequencies")


def adapter_from_line(frequencies_hz: np.ndarray, delay_s: float, z0: float, loss_db_at_1ghz: float = 0.0,
                      impedance_ohm: float | None = None, name: str = "line") -> Adapter:
    """An adapter given as an electrical length: a TEM line of ``delay_s`` (length / (velocity
    factor × c)), insertion loss ``loss_db_at_1ghz`` growing as sqrt(f) (skin effect) and
    impedance ``impedance_ohm`` (the system's ``z0`` when not given), in a ``z0`` system."""
    if delay_s < 0 or loss_db_at_1ghz < 0:
        raise ValueError(f"adapter {name}: delay and loss cannot be negative")
    line_z = z0 if impedance_ohm is None else impedance_ohm
    # AN 1287-11: |S21| = exp(-αl), αl = loss τ / (2 Z) sqrt(f / 1 GHz)  =>  loss in ohm/s.
    loss = 0.0 if delay_s == 0 else loss_db_at_1ghz * math.log(10) / 20 * 2 * line_z / delay_s
    definition = StandardDefinition(name, "thru", delay_s, loss, line_z)
    f = np.asarray(frequencies_hz, dtype=float)
    return Adapter(name, f, thru_s(definition, f, z0))


def delay_from_length(length_m: float, velocity_factor: float) -> float:
    """Delay of a line of physical length and velocity factor (e.g. 0.66 for solid PE)."""
    if not 0 < velocity_factor <= 1:
        raise ValueError("a velocity factor lies in (0, 1]")
    return length_m / (velocity_factor * SPEED_OF_LIGHT)


def adapter_from_touchstone(path: str | Path, frequencies_hz: np.ndarray, z0: float) -> Adapter:
    """An adapter from a two-port Touchstone file, in a ``z0`` system, on the sweep grid."""
    import skrf

    source = str(path)
    try:
        network = skrf.Network(source)
    except Exception as exc:  # scikit-rf raises many kinds for a bad or missing file
        raise InputError(f"cannot read the adapter's Touchstone file ({exc})", path=source,
                         fix="give the path of a readable .s2p file") from exc
    if network.nports != 2:
        raise InputError(f"an adapter is a two-port; this file has {network.nports} ports", path=source,
                         fix="give an .s2p file")
    if not np.allclose(network.z0, z0):
        network.renormalize(np.full(network.z0.shape, z0, dtype=complex))
    f = np.asarray(frequencies_hz, dtype=float)
    if same_grid(network.f, f):
        return Adapter(Path(source).stem, f, np.array(network.s))
    try:
        moved = resample(network.f, np.moveaxis(network.s, 0, -1), f)
    except ValueError as exc:
        raise InputError(f"the adapter's data cannot serve this sweep ({exc})", path=source,
                         fix="give data that cover the sweep") from exc
    worst = float(np.max(moved.estimated_error))
    if worst > ADAPTER_INTERPOLATION_TOLERANCE:
        raise InputError(f"interpolating the adapter's data onto the sweep would add about {worst:.2g} "
                         f"(tolerance {ADAPTER_INTERPOLATION_TOLERANCE:g})", path=source,
                         fix="give the adapter's data on a finer frequency grid")
    return Adapter(Path(source).stem, f, np.moveaxis(moved.values, -1, 0))


def remove_from_reflection(adapter: Adapter, frequencies_hz: np.ndarray, reflection: np.ndarray) -> np.ndarray:
    """The device's reflection behind the adapter."""
    adapter.check_grid(frequencies_hz)
    a = adapter.s
    return correct_reflection(a[:, 0, 0], a[:, 1, 1], a[:, 1, 0] * a[:, 0, 1], reflection)


def to_transfer(s: np.ndarray) -> np.ndarray:
    """T = [[-ΔS/S21, S11/S21], [-S22/S21, 1/S21]] with [b1, a1]ᵀ = T [a2, b2]ᵀ."""
    s11, s21, s12, s22 = s[:, 0, 0], s[:, 1, 0], s[:, 0, 1], s[:, 1, 1]
    t = np.empty(s.shape, dtype=complex)
    t[:, 0, 0] = (s12 * s21 - s11 * s22) / s21
    t[:, 0, 1] = s11 / s21
    t[:, 1, 0] = -s22 / s21
    t[:, 1, 1] = 1 / s21
    return t


def from_transfer(t: np.ndarray) -> np.ndarray:
    """S from T: S11 = T12/T22, S21 = 1/T22, S12 = T11 - T12 T21/T22, S22 = -T21/T22."""
    s = np.empty(t.shape, dtype=complex)
    s[:, 0, 0] = t[:, 0, 1] / t[:, 1, 1]
    s[:, 1, 0] = 1 / t[:, 1, 1]
    s[:, 0, 1] = t[:, 0, 0] - t[:, 0, 1] * t[:, 1, 0] / t[:, 1, 1]
    s[:, 1, 1] = -t[:, 1, 0] / t[:, 1, 1]
    return s


def remove_from_two_port(frequencies_hz: np.ndarray, s: np.ndarray, input_adapter: Adapter | None = None,
                         output_adapter: Adapter | None = None) -> np.ndarray:
    """The device between the adapters: T_A⁻¹ T T_B⁻¹.  ``output_adapter`` is given as it
    is usually measured, port 1 at the analyzer's port 2; it is turned round here."""
    t = to_transfer(s)
    if input_adapter is not None:
        input_adapter.check_grid(frequencies_hz)
        t = np.linalg.inv(to_transfer(input_adapter.s)) @ t
    if output_adapter is not None:
        output_adapter.check_grid(frequencies_hz)
        t = t @ np.linalg.inv(to_transfer(flipped(output_adapter.s)))
    return from_transfer(t)


def add_to_two_port(s: np.ndarray, input_adapter: Adapter | None = None,
                    output_adapter: Adapter | None = None) -> np.ndarray:
    """The cascade adapter - device - adapter (the inverse of :func:`remove_from_two_port`)."""
    t = to_transfer(s)
    if input_adapter is not None:
        t = to_transfer(input_adapter.s) @ t
    if output_adapter is not None:
        t = t @ to_transfer(flipped(output_adapter.s))
    return from_transfer(t)
