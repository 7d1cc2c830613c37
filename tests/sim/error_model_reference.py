"""The textbook error models, written out on the test side to check the simulator's raw
data against (the simulator computes its raw data by solving the signal-flow graph of the
sweep instead; see simulated-instruments/error_model.py)."""

from __future__ import annotations

import numpy as np


def three_term_raw(gamma: np.ndarray, terms: dict[str, np.ndarray]) -> np.ndarray:
    """One-port three-term model, Agilent Application Note 1287-3 (2002), one-port error
    model (from memory): Γm = e00 + e10e01 Γ / (1 - e11 Γ)."""
    return terms["directivity"] + terms["reflection_tracking"] * gamma / (1 - terms["source_match"] * gamma)


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
