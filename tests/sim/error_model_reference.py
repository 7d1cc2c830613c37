"""The error models, computed on the test side to check the simulator's raw data against,
each by a route other than the simulator's own:

- one port: scikit-rf cascades an error two-port with the load (its general connection of
  networks), where the simulator writes the three-term closed form;
- two ports: the closed forms of the twelve-term model as printed in the application note,
  where the simulator solves the signal-flow graph of the sweep (see
  simulated-instruments/error_model.py)."""

from __future__ import annotations

import numpy as np
import skrf


def three_term_raw(gamma: np.ndarray, terms: dict[str, np.ndarray]) -> np.ndarray:
    """What the receivers of a one-port analyzer read for the true reflection ``gamma``: the
    error two-port E = [[e00, e01], [e10, e11]] between the ideal analyzer and the reference
    plane, cascaded with the load by scikit-rf (``Network ** Network``).  Only the product
    e10e01 is observable, so e01 = 1 and e10 = the reflection tracking.  (The textbook's
    answer, Agilent AN 1287-3 from memory, is e00 + e10e01 Γ / (1 - e11 Γ); this does not
    use it, so that a slip in that formula -- here or in the simulator -- cannot hide.)"""
    gamma = np.atleast_1d(np.asarray(gamma, dtype=complex))
    n = gamma.size
    frequency = skrf.Frequency.from_f(np.arange(1.0, n + 1.0), unit="hz")  # the cascade is per point
    error = np.empty((n, 2, 2), dtype=complex)
    error[:, 0, 0] = terms["directivity"]
    error[:, 0, 1] = 1.0
    error[:, 1, 0] = terms["reflection_tracking"]
    error[:, 1, 1] = terms["source_match"]
    box = skrf.Network(frequency=frequency, s=error, z0=50.0)
    load = skrf.Network(frequency=frequency, s=gamma.reshape(n, 1, 1), z0=50.0)
    return (box ** load).s[:, 0, 0]


def twelve_term_raw(s: dict[str, np.ndarray], fwd: dict[str, np.ndarray],
                    rev: dict[str, np.ndarray] | None) -> dict[str, np.ndarray]:
    """The forward and reverse twelve-term models as printed in Agilent Application Note
    1287-3, "Applying Error Correction to Network Analyzer Measurements" (2002), full two-port
    error model (from memory):

        S11m = EDF + ERF (S11 - ELF ΔS) / D_F          S21m = EXF + ETF S21 / D_F
        D_F  = 1 - ESF S11 - ELF S22 + ESF ELF ΔS,     ΔS = S11 S22 - S21 S12
    and the reverse model with the roles of the ports (and of ESR, ELR) exchanged."""
    s11, s12, s21, s22 = s["s11"], s["s12"], s["s21"], s["s22"]
    delta = s11 * s22 - s21 * s12
    d_f = 1 - fwd["source_match"] * s11 - fwd["load_match"] * s22 + fwd["source_match"] * fwd["load_match"] * delta
    raw = {
        "S11": fwd["directivity"] + fwd["reflection_tracking"] * (s11 - fwd["load_match"] * delta) / d_f,
        "S21": fwd["isolation"] + fwd["transmission_tracking"] * s21 / d_f,
    }
    if rev is not None:
        d_r = 1 - rev["source_match"] * s22 - rev["load_match"] * s11 + rev["source_match"] * rev["load_match"] * delta
        raw["S22"] = rev["directivity"] + rev["reflection_tracking"] * (s22 - rev["load_match"] * delta) / d_r
        raw["S12"] = rev["isolation"] + rev["transmission_tracking"] * s12 / d_r
    return raw
