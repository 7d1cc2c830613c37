"""Circuit physics of the simulated bench, written independently of the harness.

The harness computes standards and corrections its own way; the simulator builds the truth
from two-port ABCD cascades so that a shared mistake cannot hide in both.  All arrays are
per frequency; two-port S-matrices have shape (N, 2, 2).

Sources: ABCD matrices of series, shunt and line elements and the ABCD-to-S conversion are
those of D. M. Pozar, *Microwave Engineering*, 4th ed., Table 4.1 and Table 4.2.
"""

from __future__ import annotations

import numpy as np

Z_REF = 50.0


def series_impedance(z: np.ndarray) -> np.ndarray:
    """ABCD of a series impedance Z: [[1, Z], [0, 1]] (Pozar Table 4.1)."""
    z = np.asarray(z, dtype=complex)
    abcd = np.zeros(z.shape + (2, 2), dtype=complex)
    abcd[..., 0, 0] = 1.0
    abcd[..., 0, 1] = z
    abcd[..., 1, 1] = 1.0
    return abcd


def shunt_admittance(y: np.ndarray) -> np.ndarray:
    """ABCD of a shunt admittance Y: [[1, 0], [Y, 1]] (Pozar Table 4.1)."""
    y = np.asarray(y, dtype=complex)
    abcd = np.zeros(y.shape + (2, 2), dtype=complex)
    abcd[..., 0, 0] = 1.0
    abcd[..., 1, 0] = y
    abcd[..., 1, 1] = 1.0
    return abcd


def line(frequencies_hz: np.ndarray, z_line: float, delay_s: float,
         loss_ohm_per_s: float = 0.0) -> np.ndarray:
    """ABCD of a TEM line from the telegrapher's equations (Pozar §2.1 and Table 4.1:
    [[cosh γl, Zc sinh γl], [sinh γl / Zc, cosh γl]]).

    The whole line has L = Z·τ, C = τ/Z and the skin-effect surface impedance of its
    conductors in series, R(1 + j) with R = loss·τ·sqrt(f / 1 GHz) (a good conductor's
    internal reactance equals its resistance; Pozar §1.7), ``loss_ohm_per_s`` being the usual
    offset-loss figure of a coaxial standard (ohm per second of delay at 1 GHz); G = 0.
    """
    f = np.asarray(frequencies_hz, dtype=float)
    abcd = np.zeros(f.shape + (2, 2), dtype=complex)
    if delay_s == 0:
        abcd[..., 0, 0] = abcd[..., 1, 1] = 1.0
        return abcd
    w = 2 * np.pi * f
    series = (1 + 1j) * loss_ohm_per_s * delay_s * np.sqrt(f / 1e9) + 1j * w * z_line * delay_s
    shunt = 1j * w * delay_s / z_line
    gamma_l = np.sqrt(series * shunt)
    z_c = np.sqrt(series / shunt)
    abcd[..., 0, 0] = np.cosh(gamma_l)
    abcd[..., 0, 1] = z_c * np.sinh(gamma_l)
    abcd[..., 1, 0] = np.sinh(gamma_l) / z_c
    abcd[..., 1, 1] = np.cosh(gamma_l)
    return abcd


def cascade(*abcds: np.ndarray) -> np.ndarray:
    result = abcds[0]
    for item in abcds[1:]:
        result = result @ item
    return result


def abcd_to_s(abcd: np.ndarray, z0: float = Z_REF) -> np.ndarray:
    """Pozar Table 4.2, ABCD to S for equal real reference impedances Z0."""
    a, b, c, d = abcd[..., 0, 0], abcd[..., 0, 1], abcd[..., 1, 0], abcd[..., 1, 1]
    denominator = a + b / z0 + c * z0 + d
    s = np.empty(abcd.shape, dtype=complex)
    s[..., 0, 0] = (a + b / z0 - c * z0 - d) / denominator
    s[..., 0, 1] = 2 * (a * d - b * c) / denominator
    s[..., 1, 0] = 2 / denominator
    s[..., 1, 1] = (-a + b / z0 - c * z0 + d) / denominator
    return s


def load_reflection(z_load: np.ndarray, z0: float = Z_REF) -> np.ndarray:
    z_load = np.asarray(z_load, dtype=complex)
    return (z_load - z0) / (z_load + z0)


def terminated_input(s: np.ndarray, gamma_load: np.ndarray) -> np.ndarray:
    """Input reflection of a two-port whose output sees ``gamma_load``:
    Γin = S11 + S12 S21 ΓL / (1 - S22 ΓL)  (Pozar eq. 12.3a)."""
    s11, s12, s21, s22 = s[..., 0, 0], s[..., 0, 1], s[..., 1, 0], s[..., 1, 1]
    return s11 + s12 * s21 * gamma_load / (1 - s22 * gamma_load)


def terminate_abcd_open(abcd: np.ndarray, z_end: np.ndarray | None, z0: float = Z_REF) -> np.ndarray:
    """Reflection at the input of ``abcd`` ended in ``z_end`` (None = open circuit):
    Zin = (A Z + B) / (C Z + D); open: Zin = A / C."""
    a, b, c, d = abcd[..., 0, 0], abcd[..., 0, 1], abcd[..., 1, 0], abcd[..., 1, 1]
    if z_end is None:
        z_in = a / c
    else:
        z_in = (a * z_end + b) / (c * z_end + d)
    return load_reflection(z_in, z0)


def vswr_to_reflection(vswr: float | np.ndarray) -> float | np.ndarray:
    return (np.asarray(vswr) - 1.0) / (np.asarray(vswr) + 1.0)


def cascade_s(first: np.ndarray, second: np.ndarray) -> np.ndarray:
    """S-parameters (N, 2, 2) of two two-ports in cascade, port 2 of ``first`` joined to
    port 1 of ``second``.  Solved from the signal-flow graph of the junction (the waves that
    bounce between ``first``'s S22 and ``second``'s S11 sum to a geometric series); unlike the
    ABCD route it also holds for blocks with no transmission."""
    a11, a12, a21, a22 = first[..., 0, 0], first[..., 0, 1], first[..., 1, 0], first[..., 1, 1]
    b11, b12, b21, b22 = second[..., 0, 0], second[..., 0, 1], second[..., 1, 0], second[..., 1, 1]
    loop = 1.0 / (1.0 - a22 * b11)
    out = np.empty(np.broadcast_shapes(first.shape, second.shape), dtype=complex)
    out[..., 0, 0] = a11 + a12 * b11 * a21 * loop
    out[..., 0, 1] = a12 * b12 * loop
    out[..., 1, 0] = a21 * b21 * loop
    out[..., 1, 1] = b22 + b21 * a22 * b12 * loop
    return out


def reverse_s(s: np.ndarray) -> np.ndarray:
    """The same two-port turned around (its port 2 becomes port 1)."""
    return s[..., ::-1, ::-1]


def connector_step(reflection: np.ndarray) -> np.ndarray:
    """A connector interface as a small symmetric step: S11 = c, S22 = -c,
    S21 = S12 = sqrt(1 - c²) (a lossless impedance step, Pozar §2.3, to first order)."""
    c = np.asarray(reflection, dtype=complex)
    step = np.empty(c.shape + (2, 2), dtype=complex)
    step[..., 0, 0] = c
    step[..., 1, 1] = -c
    step[..., 0, 1] = step[..., 1, 0] = _sqrt_one_minus(c * c)
    return step


def _sqrt_one_minus(u: np.ndarray) -> np.ndarray:
    """sqrt(1 - u).  For |u| below 1e-4 (a connector's c of 0.01 or less; real ones are a
    few 1e-4) the binomial series to u³ is exact to double precision -- the next term,
    5u⁴/128, is below 4e-18 -- and costs a third of a complex square root."""
    if u.size and np.max(np.abs(u)) < 1e-4:
        return 1.0 - u * (0.5 + u * (0.125 + u * 0.0625))
    return np.sqrt(1.0 - u)


def behind_connector(reflection: np.ndarray, gamma: np.ndarray) -> np.ndarray:
    """What a port sees of ``gamma`` through a :func:`connector_step` of reflection c:
    Γin = c + (1 - c²) Γ / (1 + c Γ) (Pozar eq. 12.3a with S12 S21 = 1 - c², no square root)."""
    c = np.asarray(reflection, dtype=complex)
    return c + (1.0 - c * c) * gamma / (1.0 + c * gamma)


def diagonal_s(gamma_1: np.ndarray, gamma_2: np.ndarray) -> np.ndarray:
    """Two unrelated one-ports seen as one two-port with no transmission."""
    g1 = np.asarray(gamma_1, dtype=complex)
    s = np.zeros(g1.shape + (2, 2), dtype=complex)
    s[..., 0, 0] = g1
    s[..., 1, 1] = gamma_2
    return s
