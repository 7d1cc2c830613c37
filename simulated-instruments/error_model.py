"""Hidden raw error terms of a simulated analyzer, and the physics that turns the network
between its reference planes into what its receivers see.

The terms are those of the twelve-term model of a switched two-port analyzer, six per
direction (Agilent Application Note 1287-3, "Applying Error Correction to Network Analyzer
Measurements", 2002, and EURAMET cg-12 v3.0, 2018; both cited from memory):

    directivity (e00), source match (e11), reflection tracking (e10e01),
    load match (e22), transmission tracking (e10e32), isolation (e30).

A one-port analyzer has the first three.  Two-port raw data is not computed from the
textbook's closed form but by solving the signal-flow graph of the sweep (see
:meth:`DirectionTerms.measure`), so that the tests, which check the closed form, check this
physics.  A lone one-port's raw data (:meth:`DirectionTerms.measure_reflection`) *is* the
three-term closed form; its tests check it against scikit-rf's cascade of an error two-port
with the load instead (tests/sim/error_model_reference.py).

Terms vary smoothly with frequency (a magnitude ripple, the phase of cable and coupler
delays, skin-effect cable loss), sit at the raw magnitudes of an uncorrected analyzer, and
are seeded so runs repeat.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, fields, replace

import numpy as np

#: The analyzer models: which directions they sweep and which parameters they measure.
MODEL_DIRECTIONS = {
    "reflection": ("forward",),
    "forward": ("forward",),
    "full": ("forward", "reverse"),
}
MODEL_PARAMETERS = {
    "reflection": ("S11",),
    "forward": ("S11", "S21"),
    "full": ("S11", "S21", "S12", "S22"),
}
ONE_PORT_TERMS = ("directivity", "source_match", "reflection_tracking")
TWO_PORT_TERMS = ONE_PORT_TERMS + ("load_match", "transmission_tracking", "isolation")


@dataclass(frozen=True)
class PortErrorSettings:
    """Raw error-term magnitudes of one port (dB) and its delays."""

    directivity_db: float = -28.0
    source_match_db: float = -20.0
    #: The port's match while it terminates (the other port drives): not its source match,
    #: because the source switch and its termination differ.
    load_match_db: float = -18.0
    tracking_db: float = -1.2
    #: Leakage from the other port's source into this port's receiver.
    isolation_db: float = -100.0
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
        return {name: getattr(self, name) for name in ONE_PORT_TERMS}


@dataclass(frozen=True)
class DirectionTerms:
    """The six terms of one direction (the driving port's three, the receiving port's
    load match, transmission tracking and isolation) on one grid."""

    directivity: np.ndarray
    source_match: np.ndarray
    reflection_tracking: np.ndarray
    load_match: np.ndarray
    transmission_tracking: np.ndarray
    isolation: np.ndarray

    def one_port(self) -> OnePortTerms:
        return OnePortTerms(self.directivity, self.source_match, self.reflection_tracking)

    def as_dict(self, one_port: bool = False) -> dict[str, np.ndarray]:
        names = ONE_PORT_TERMS if one_port else TWO_PORT_TERMS
        return {name: getattr(self, name) for name in names}

    def scaled(self, **factors: np.ndarray | complex) -> DirectionTerms:
        """The terms with some multiplied by factors (drift); a factor of exactly one leaves
        its term as it is (the same array, not a copy)."""
        return replace(self, **{name: getattr(self, name) * value for name, value in factors.items()
                                if not (np.isscalar(value) and value == 1.0)})

    def measure(self, network: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Raw (reflection, transmission) ratios for the two-port ``network`` (N, 2, 2) between
        the reference planes, its port 1 facing the driving port.

        Signal-flow solution: with the wave into the driving plane normalised to one, the
        waves a incident on the network satisfy a = Γ b + u, b = S a, where Γ holds the
        source match (driving side) and the load match (receiving side) and u = (1, 0).  So
        (I - Γ S) a = u, solved here by Cramer's rule for every frequency at once.  The
        receivers then see directivity + tracking · b1 and isolation + tracking · b2.
        """
        b1, b2 = self.waves(*(network[..., i, j] for i, j in ((0, 0), (0, 1), (1, 0), (1, 1))))
        reflection = self.directivity + self.reflection_tracking * b1
        transmission = self.isolation + self.transmission_tracking * b2
        return reflection, transmission

    def waves(self, s11: np.ndarray, s12: np.ndarray, s21: np.ndarray,
              s22: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The waves b1, b2 leaving the planes of the network (s11, s12, s21, s22), solved
        as :meth:`measure` says; they depend on the match terms only, not on directivity,
        tracking or isolation.  Written pass by pass in place (contiguous inputs are fastest)."""
        m11 = np.multiply(self.source_match, s11)
        np.subtract(1.0, m11, out=m11)
        m22 = np.multiply(self.load_match, s22)
        np.subtract(1.0, m22, out=m22)
        m12 = np.multiply(self.source_match, s12)  # -m12 of (I - Γ S)
        m21 = np.multiply(self.load_match, s21)  # -m21
        determinant = np.multiply(m11, m22)
        np.subtract(determinant, np.multiply(m12, m21, out=m12), out=determinant)
        inverse = np.reciprocal(determinant, out=determinant)
        a1 = np.multiply(m22, inverse, out=m22)
        a2 = np.multiply(m21, inverse, out=m21)
        b1 = np.multiply(s11, a1, out=m11)
        b1 += np.multiply(s12, a2, out=m12)
        b2 = np.multiply(s21, a1, out=inverse)
        b2 += np.multiply(s22, a2, out=a2)
        return b1, b2

    def measure_reflection(self, gamma: np.ndarray) -> np.ndarray:
        """Raw reflection ratio of a lone one-port ``gamma``, in closed form: the flow graph of
        :meth:`measure` with nothing transmitted, a = 1 + e11 Γ a, so b1 = Γ / (1 - e11 Γ)."""
        return self.directivity + self.reflection_tracking * self.reflected_wave(gamma)

    def reflected_wave(self, gamma: np.ndarray) -> np.ndarray:
        """b1 of a lone one-port: Γ / (1 - e11 Γ)."""
        return gamma / (1.0 - self.source_match * gamma)


@dataclass(frozen=True)
class PortTerms:
    """What one port contributes: its own three terms split into the one-way source and
    receiver paths (so that the tracking of a transmission can be formed), its load match
    and the leakage into its receiver."""

    directivity: np.ndarray
    source_match: np.ndarray
    load_match: np.ndarray
    source_wave: np.ndarray
    receiver_wave: np.ndarray
    leakage: np.ndarray


class PortErrorModel:
    """Smooth, seeded raw error terms for one port."""

    def __init__(self, settings: PortErrorSettings, seed: int) -> None:
        self.settings = settings
        rng = np.random.default_rng(seed)
        self._phases = rng.uniform(0, 2 * np.pi, size=10)
        self._ripple_scale = rng.uniform(0.7, 1.3, size=5)

    def _magnitude(self, db: float, k: int, w: np.ndarray) -> np.ndarray:
        s = self.settings
        ripple = s.ripple * self._ripple_scale[k]
        return 10 ** (db / 20) * (1 + ripple * np.sin(w / s.ripple_period_hz * (1 + 0.3 * k) + self._phases[k]))

    def port_terms(self, frequencies_hz: np.ndarray) -> PortTerms:
        s = self.settings
        f = np.asarray(frequencies_hz, dtype=float)
        p = self._phases
        w = 2 * np.pi * f
        directivity = self._magnitude(s.directivity_db, 0, w) * np.exp(1j * (p[5] - w * s.coupler_delay_s))
        source_match = self._magnitude(s.source_match_db, 1, w) * np.exp(1j * (p[6] - w * 2 * s.cable_delay_s * 0.37))
        load_match = self._magnitude(s.load_match_db, 3, w) * np.exp(1j * (p[7] - w * 2 * s.cable_delay_s * 0.41))
        leakage = self._magnitude(s.isolation_db, 4, w) * np.exp(1j * (p[8] - w * 3.1 * s.cable_delay_s))
        # One way through the test-port cable: half its skin-effect loss and delay, a ripple
        # of a few hundredths of a dB (tracking is flat to a few tenths of a dB).
        one_way = 10 ** (s.tracking_db / 40) * np.sqrt(1 - 0.03 * np.sqrt(f / 1e9))
        tracking_ripple = 1 + 0.02 * s.ripple * self._ripple_scale[2] * np.sin(w / s.ripple_period_hz * 0.8 + p[2])
        source_wave = one_way * tracking_ripple * np.exp(1j * (p[3] - w * s.cable_delay_s))
        receiver_wave = one_way * tracking_ripple * np.exp(1j * (p[4] - w * s.cable_delay_s))
        return PortTerms(directivity, source_match, load_match, source_wave, receiver_wave, leakage)

    def terms(self, frequencies_hz: np.ndarray) -> OnePortTerms:
        """The port's three one-port terms (as when it drives)."""
        t = self.port_terms(frequencies_hz)
        return OnePortTerms(t.directivity, t.source_match, t.source_wave * t.receiver_wave)


class AnalyzerErrorModel:
    """The hidden terms of a whole analyzer: one :class:`PortErrorModel` per port and, for
    two-port models, a seeded receiver-ratio factor per direction (the reference and test
    receivers of a real analyzer never match exactly, so transmission tracking is not simply
    the product of the two ports' one-way paths)."""

    def __init__(self, model: str, port_settings: Sequence[PortErrorSettings], seed: int) -> None:
        if model not in MODEL_DIRECTIONS:
            raise ValueError(f"unknown analyzer model {model!r}; use one of {', '.join(MODEL_DIRECTIONS)}")
        ports = 1 if model == "reflection" else 2
        settings = list(port_settings) or [PortErrorSettings()]
        while len(settings) < ports:
            settings.append(settings[-1])
        self.model = model
        self.ports = ports
        self.port_models = [PortErrorModel(s, seed * 100 + i) for i, s in enumerate(settings[:ports])]
        rng = np.random.default_rng(seed * 100 + 99)
        self._ratio = rng.uniform(-1, 1, size=(2, 3))

    def _receiver_ratio(self, direction: int, f: np.ndarray) -> np.ndarray:
        a, b, c = self._ratio[direction]
        return (1 + 0.02 * a * np.sin(2 * np.pi * f / (400e6 + 100e6 * b))) * np.exp(1j * 0.05 * c)

    def terms(self, frequencies_hz: np.ndarray) -> dict[str, DirectionTerms]:
        """The terms of every direction the model sweeps, on ``frequencies_hz``."""
        f = np.asarray(frequencies_hz, dtype=float)
        port = [m.port_terms(f) for m in self.port_models]
        if self.model == "reflection":
            p = port[0]
            zero = np.zeros(f.shape, dtype=complex)
            return {"forward": DirectionTerms(p.directivity, p.source_match, p.source_wave * p.receiver_wave,
                                              zero, zero, zero)}
        result = {}
        for index, direction in enumerate(MODEL_DIRECTIONS[self.model]):
            drive, receive = (port[0], port[1]) if direction == "forward" else (port[1], port[0])
            result[direction] = DirectionTerms(
                directivity=drive.directivity,
                source_match=drive.source_match,
                reflection_tracking=drive.source_wave * drive.receiver_wave,
                load_match=receive.load_match,
                transmission_tracking=drive.source_wave * receive.receiver_wave * self._receiver_ratio(index, f),
                isolation=receive.leakage,
            )
        return result


def freeze(terms: DirectionTerms) -> DirectionTerms:
    """Make every array of ``terms`` read-only (they are cached and shared)."""
    for item in fields(terms):
        getattr(terms, item.name).setflags(write=False)
    return terms


def correct_one_port(measured: np.ndarray, terms: DirectionTerms) -> np.ndarray:
    """Invert the three-term model: Γ = (m - e00) / (e10e01 + e11 (m - e00))."""
    offset = measured - terms.directivity
    return offset / (terms.reflection_tracking + terms.source_match * offset)


def correct_two_port(raw: dict[str, np.ndarray], forward: DirectionTerms,
                     reverse: DirectionTerms) -> dict[str, np.ndarray]:
    """Invert the twelve-term model (the closed form of Agilent AN 1287-3, from memory)."""
    n11 = (raw["S11"] - forward.directivity) / forward.reflection_tracking
    n21 = (raw["S21"] - forward.isolation) / forward.transmission_tracking
    n12 = (raw["S12"] - reverse.isolation) / reverse.transmission_tracking
    n22 = (raw["S22"] - reverse.directivity) / reverse.reflection_tracking
    esf, elf, esr, elr = forward.source_match, forward.load_match, reverse.source_match, reverse.load_match
    denominator = (1 + n11 * esf) * (1 + n22 * esr) - n21 * n12 * elf * elr
    return {
        "S11": (n11 * (1 + n22 * esr) - elf * n21 * n12) / denominator,
        "S21": n21 * (1 + n22 * (esr - elf)) / denominator,
        "S12": n12 * (1 + n11 * (esf - elr)) / denominator,
        "S22": (n22 * (1 + n11 * esf) - elr * n21 * n12) / denominator,
    }
