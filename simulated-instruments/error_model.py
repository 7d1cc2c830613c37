"""Hidden raw error terms of a simulated analyzer port, and the error model that turns a
true reflection into what the receivers see.

One-port three-term model, as in Agilent Application Note 1287-3, "Applying Error
Correction to Network Analyzer Measurements" (2002), and EURAMET cg-12 v3.0 (2018), the
one-port error model (both cited from memory)::

    Γm = e00 + e10e01 Γ / (1 - e11 Γ)

e00 directivity, e11 source match, e10e01 reflection tracking.  Terms vary smoothly with
frequency (a magnitude ripple and the phase of the cable and coupler delays), are seeded so
runs repeat, and sit at raw magnitudes of a real uncorrected analyzer.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class PortErrorSettings:
    """Raw error-term magnitudes of one port (dB) and its delays."""

    directivity_db: float = -28.0
    source_match_db: float = -20.0
    tracking_db: float = -1.2
    cable_delay_s: float = 2.2e-9
    coupler_delay_s: float = 0.6e-9
    ripple: float = 0.25
    ripple_period_hz: float = 310e6


@dataclass(frozen=True)
class OnePortTerms:
    """Error terms of one port on one grid (complex arrays)."""

    directivity: np.ndarray
    source_match: np.ndarray
    reflection_tracking: np.ndarray

    def apply(self, gamma: np.ndarray) -> np.ndarray:
        """What the receivers measure for a true reflection ``gamma``."""
        return self.directivity + self.reflection_tracking * gamma / (1.0 - self.source_match * gamma)

    def as_dict(self) -> dict[str, np.ndarray]:
        return {
            "directivity": self.directivity,
            "source_match": self.source_match,
            "reflection_tracking": self.reflection_tracking,
        }


class PortErrorModel:
    """Smooth, seeded raw error terms for one port."""

    def __init__(self, settings: PortErrorSettings, seed: int) -> None:
        self.settings = settings
        rng = np.random.default_rng(seed)
        self._phases = rng.uniform(0, 2 * np.pi, size=6)
        self._ripple_scale = rng.uniform(0.7, 1.3, size=3)

    def terms(self, frequencies_hz: np.ndarray) -> OnePortTerms:
        s = self.settings
        f = np.asarray(frequencies_hz, dtype=float)
        p = self._phases
        ripple = s.ripple * self._ripple_scale
        w = 2 * np.pi * f

        def magnitude(db: float, k: int) -> np.ndarray:
            return 10 ** (db / 20) * (1 + ripple[k] * np.sin(w / s.ripple_period_hz * (1 + 0.3 * k) + p[k]))

        directivity = magnitude(s.directivity_db, 0) * np.exp(1j * (p[3] - w * s.coupler_delay_s))
        source_match = magnitude(s.source_match_db, 1) * np.exp(1j * (p[4] - w * 2 * s.cable_delay_s * 0.37))
        # Tracking: the round trip through the test-port cable, with a little skin-effect
        # loss and a small ripple (ripple scaled down: tracking is flat to a few tenths of dB).
        loss = 1 - 0.03 * np.sqrt(f / 1e9)
        tracking_ripple = 1 + 0.04 * ripple[2] * np.sin(w / s.ripple_period_hz * 0.8 + p[2])
        tracking = (
            10 ** (s.tracking_db / 20) * loss * tracking_ripple
            * np.exp(1j * (p[5] - w * 2 * s.cable_delay_s))
        )
        return OnePortTerms(directivity, source_match, tracking)
