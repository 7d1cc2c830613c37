"""Two-port calibration: full SOLT (12-term), one-path for forward-only analyzers, and thru
response; applying the terms to raw S-parameters; moving a reflection through a two-port.

The 12-term model (Agilent AN 1287-3; W. Kruppa and K. F. Sodomsky, "An Explicit Solution
for the Scattering Parameters of a Linear Two-Port Measured with an Imperfect Test Set",
IEEE Trans. MTT-19(1), 1971; both cited from memory).  Forward (port 1 driving)::

    D1   = 1 - ESF S11 - ELF S22 + ESF ELF ΔS
    S11m = EDF + ERF (S11 - ELF ΔS) / D1         S21m = EXF + ETF S21 / D1

and the reverse direction alike with EDR, ESR, ERR, ELR, ETR, EXR.  Terms are named
"forward.<term>" / "reverse.<term>" with the bench's names: directivity, source_match,
reflection_tracking, load_match, transmission_tracking, isolation.

Solving: the one-port terms of each port come from its reflect standards
(:func:`lineproof.calibration.solve_one_port`), then the thru gives the load match (the
corrected thru reflection with the thru's model removed) and the transmission tracking; this
is the computation of scikit-rf's ``TwelveTerm.run``, written for all frequencies at once, and
the tests hold the two to 1e-12.  A one-path analyzer (forward only) measures the device,
then the device turned round: its reverse terms are its forward terms.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from lineproof.calibration import correct_reflection, one_port_terms, require_grid, solve_one_port
from lineproof.errors import CalibrationError
from lineproof.values import CalibrationRecord

DIRECTION_TERMS = ("directivity", "source_match", "reflection_tracking", "load_match",
                   "transmission_tracking", "isolation")
TWO_PORT_TERMS = tuple(f"{d}.{t}" for d in ("forward", "reverse") for t in DIRECTION_TERMS)


def s_matrix(s11: np.ndarray, s21: np.ndarray, s12: np.ndarray, s22: np.ndarray) -> np.ndarray:
    """Stack four traces into S-parameters of shape (N, 2, 2)."""
    s = np.empty(np.shape(s11) + (2, 2), dtype=complex)
    s[:, 0, 0], s[:, 1, 0], s[:, 0, 1], s[:, 1, 1] = s11, s21, s12, s22
    return s


def flipped(s: np.ndarray) -> np.ndarray:
    """The same two-port turned round (ports 1 and 2 exchanged)."""
    return s[:, ::-1, ::-1]


def _thru_terms(e00: np.ndarray, e11: np.ndarray, e10e01: np.ndarray, thru_s11m: np.ndarray,
                thru_s21m: np.ndarray, thru: np.ndarray, isolation: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Load match and transmission tracking of one direction from the thru (thru in the
    direction's own port order: element [0, 0] faces the driving port)."""
    t11, t21, t12, t22 = thru[:, 0, 0], thru[:, 1, 0], thru[:, 0, 1], thru[:, 1, 1]
    gamma = correct_reflection(e00, e11, e10e01, thru_s11m) - t11
    load_match = gamma / (t21 * t12 + t22 * gamma)
    determinant = t11 * t22 - t21 * t12
    tracking = (thru_s21m - isolation) * (1 - e11 * t11 - load_match * t22 + e11 * load_match * determinant) / t21
    return load_match, tracking


def _check(frequencies: np.ndarray, arrays: Mapping[str, np.ndarray]) -> None:
    for name, array in arrays.items():
        if np.shape(array)[:1] != frequencies.shape:
            raise CalibrationError(f"{name} was measured on a different grid from the others "
                                   f"({np.shape(array)[0]} points, the calibration grid has {frequencies.size}); "
                                   "measure every standard with the same sweep plan")


def solve_solt(
    frequencies_hz: np.ndarray,
    port1: Mapping[str, np.ndarray],
    port2: Mapping[str, np.ndarray],
    ideals: Mapping[str, np.ndarray],
    thru_raw: np.ndarray,
    thru_ideal: np.ndarray,
    isolation_raw: np.ndarray | None = None,
    kit_source: str = "",
) -> dict[str, np.ndarray]:
    """Twelve terms from reflect standards on each port (raw S11 at port 1, raw S22 at
    port 2, keyed like ``ideals``), the thru (raw (N, 2, 2) and its model), and optionally a
    measurement with loads on both ports (isolation; zero when not measured).  ``kit_source``
    (the kit file) is named when the standards are refused."""
    f = np.asarray(frequencies_hz, dtype=float)
    _check(f, {"thru": thru_raw, "thru model": thru_ideal, **{f"port 1 {k}": v for k, v in port1.items()},
               **{f"port 2 {k}": v for k, v in port2.items()}})
    terms: dict[str, np.ndarray] = {}
    for direction, measured, flip in (("forward", port1, False), ("reverse", port2, True)):
        one = solve_one_port(f, measured, ideals, kit_source=kit_source)
        e00, e11, e10e01 = one["directivity"], one["source_match"], one["reflection_tracking"]
        thru = flipped(thru_ideal) if flip else thru_ideal
        raw = flipped(thru_raw) if flip else thru_raw
        leak = np.zeros(f.shape, complex) if isolation_raw is None else (flipped(isolation_raw) if flip else isolation_raw)[:, 1, 0]
        load_match, tracking = _thru_terms(e00, e11, e10e01, raw[:, 0, 0], raw[:, 1, 0], thru, leak)
        for name, value in zip(DIRECTION_TERMS, (e00, e11, e10e01, load_match, tracking, leak), strict=True):
            terms[f"{direction}.{name}"] = value
    return terms


def solve_one_path(
    frequencies_hz: np.ndarray,
    port1: Mapping[str, np.ndarray],
    ideals: Mapping[str, np.ndarray],
    thru_s11_raw: np.ndarray,
    thru_s21_raw: np.ndarray,
    thru_ideal: np.ndarray,
    isolation_s21_raw: np.ndarray | None = None,
    kit_source: str = "",
) -> dict[str, np.ndarray]:
    """Forward terms of a forward-only analyzer (reflect standards at port 1, the thru's raw
    S11 and S21, optionally raw S21 with loads on both ports); the reverse terms are the same,
    because the device is turned round for its reverse measurement."""
    f = np.asarray(frequencies_hz, dtype=float)
    _check(f, {"thru S11": thru_s11_raw, "thru S21": thru_s21_raw, "thru model": thru_ideal,
               **{f"port 1 {k}": v for k, v in port1.items()}})
    one = solve_one_port(f, port1, ideals, kit_source=kit_source)
    e00, e11, e10e01 = one["directivity"], one["source_match"], one["reflection_tracking"]
    leak = np.zeros(f.shape, complex) if isolation_s21_raw is None else np.asarray(isolation_s21_raw, complex)
    load_match, tracking = _thru_terms(e00, e11, e10e01, thru_s11_raw, thru_s21_raw, thru_ideal, leak)
    forward = dict(zip(DIRECTION_TERMS, (e00, e11, e10e01, load_match, tracking, leak), strict=True))
    return {f"{d}.{name}": value for d in ("forward", "reverse") for name, value in forward.items()}


def solve_thru_response(thru_s21_raw: np.ndarray, thru_ideal: np.ndarray) -> dict[str, np.ndarray]:
    """Transmission-only normalization: tracking = raw S21 of the thru / the thru's model S21.
    It corrects |S21| and phase for tracking only; mismatch at either port stays in."""
    return {"forward.transmission_tracking": np.asarray(thru_s21_raw) / thru_ideal[:, 1, 0]}


def compose_one_path(forward_raw: tuple[np.ndarray, np.ndarray], reversed_raw: tuple[np.ndarray, np.ndarray]) -> np.ndarray:
    """Raw (N, 2, 2) from a forward-only analyzer's (S11m, S21m) of the device and of the
    device turned round: the second pair stands for the reverse direction's S22m and S12m."""
    return s_matrix(forward_raw[0], forward_raw[1], reversed_raw[1], reversed_raw[0])


def _direction(calibration: CalibrationRecord, direction: str) -> tuple[np.ndarray, ...]:
    missing = [f"{direction}.{t}" for t in DIRECTION_TERMS if f"{direction}.{t}" not in calibration.terms]
    if missing:
        raise CalibrationError(f"calibration {calibration.calibration_id} ({calibration.method}) lacks "
                               f"{', '.join(missing)}; it cannot correct two-port data")
    return tuple(calibration.terms[f"{direction}.{t}"] for t in DIRECTION_TERMS)


Traces = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]


class TwelveTermCorrection:
    """A two-port calibration made ready to apply to many sweeps: its twelve terms, with the
    four tracking terms inverted once (a complex multiplication costs a fifth of a complex
    division).  Build one per calibration; :meth:`apply` corrects the traces of a sweep."""

    def __init__(self, calibration: CalibrationRecord) -> None:
        self.calibration = calibration
        edf, esf, erf, elf, etf, exf = _direction(calibration, "forward")
        edr, esr, err, elr, etr, exr = _direction(calibration, "reverse")
        self._forward = (edf, esf, 1 / erf, elf, 1 / etf, exf)
        self._reverse = (edr, esr, 1 / err, elr, 1 / etr, exr)

    def apply(self, frequencies_hz: np.ndarray, s11m: np.ndarray, s21m: np.ndarray, s12m: np.ndarray,
              s22m: np.ndarray) -> Traces:
        """Corrected (S11, S21, S12, S22) from the raw traces, with the 12-term formulas::

            N11 = (S11m - EDF)/ERF   N21 = (S21m - EXF)/ETF   N12 = (S12m - EXR)/ETR   N22 = (S22m - EDR)/ERR
            D   = (1 + N11 ESF)(1 + N22 ESR) - N21 N12 ELF ELR
            S11 = (N11 (1 + N22 ESR) - ELF N21 N12) / D      S21 = N21 (1 + N22 (ESR - ELF)) / D
            S22 = (N22 (1 + N11 ESF) - ELR N21 N12) / D      S12 = N12 (1 + N11 (ESF - ELR)) / D
        """
        require_grid(self.calibration, frequencies_hz)
        edf, esf, inverse_erf, elf, inverse_etf, exf = self._forward
        edr, esr, inverse_err, elr, inverse_etr, exr = self._reverse
        # In place where a temporary is free again: fewer passes through memory (0.2 ms
        # instead of 0.3 ms at 10,001 points; tests/bench/bench_calibration.py).
        n11 = s11m - edf
        n11 *= inverse_erf
        n21 = s21m - exf
        n21 *= inverse_etf
        n12 = s12m - exr
        n12 *= inverse_etr
        n22 = s22m - edr
        n22 *= inverse_err
        product = n21 * n12
        forward = n11 * esf   # 1 + N11 ESF
        forward += 1
        reverse = n22 * esr   # 1 + N22 ESR
        reverse += 1
        through_load = product * elf
        inverse = forward * reverse
        inverse -= through_load * elr
        np.reciprocal(inverse, out=inverse)
        s11 = n11 * reverse
        s11 -= through_load
        s11 *= inverse
        s21 = np.subtract(reverse, n22 * elf)
        s21 *= n21
        s21 *= inverse
        s12 = np.subtract(forward, n11 * elr)
        s12 *= n12
        s12 *= inverse
        s22 = n22 * forward
        product *= elr
        s22 -= product
        s22 *= inverse
        return s11, s21, s12, s22


def correct_two_port(calibration: CalibrationRecord, frequencies_hz: np.ndarray, raw: np.ndarray) -> np.ndarray:
    """Corrected S-parameters (N, 2, 2) from raw ones (N, 2, 2); see
    :meth:`TwelveTermCorrection.apply` for the formulas (and for many sweeps with one calibration)."""
    corrected = TwelveTermCorrection(calibration).apply(frequencies_hz, raw[:, 0, 0], raw[:, 1, 0], raw[:, 0, 1],
                                                         raw[:, 1, 1])
    return s_matrix(*corrected)


def embed_two_port(terms: Mapping[str, np.ndarray], s: np.ndarray) -> np.ndarray:
    """What the raw receivers read for true S-parameters ``s`` (the 12-term model)."""
    s11, s21, s12, s22 = s[:, 0, 0], s[:, 1, 0], s[:, 0, 1], s[:, 1, 1]
    delta = s11 * s22 - s21 * s12
    t = {name: terms[name] for name in TWO_PORT_TERMS}
    d1 = 1 - t["forward.source_match"] * s11 - t["forward.load_match"] * s22 \
        + t["forward.source_match"] * t["forward.load_match"] * delta
    d2 = 1 - t["reverse.load_match"] * s11 - t["reverse.source_match"] * s22 \
        + t["reverse.source_match"] * t["reverse.load_match"] * delta
    return s_matrix(
        t["forward.directivity"] + t["forward.reflection_tracking"] * (s11 - t["forward.load_match"] * delta) / d1,
        t["forward.isolation"] + t["forward.transmission_tracking"] * s21 / d1,
        t["reverse.isolation"] + t["reverse.transmission_tracking"] * s12 / d2,
        t["reverse.directivity"] + t["reverse.reflection_tracking"] * (s22 - t["reverse.load_match"] * delta) / d2,
    )


def correct_transmission(calibration: CalibrationRecord, frequencies_hz: np.ndarray, raw_s21: np.ndarray) -> np.ndarray:
    """S21 from raw with a thru-response calibration (or the forward tracking of any other)."""
    require_grid(calibration, frequencies_hz)
    name = "forward.transmission_tracking"
    if name not in calibration.terms:
        raise CalibrationError(f"calibration {calibration.calibration_id} ({calibration.method}) has no "
                               "transmission tracking; calibrate with a thru first")
    leak = calibration.terms.get("forward.isolation", 0.0)
    return (np.asarray(raw_s21) - leak) / calibration.terms[name]


def terminated_reflection(s: np.ndarray, load: np.ndarray) -> np.ndarray:
    """Input reflection of a two-port whose output sees ``load``:
    Γin = S11 + S21 S12 ΓL / (1 - S22 ΓL)  (D. M. Pozar, Microwave Engineering, eq. 12.3a)."""
    return s[:, 0, 0] + s[:, 1, 0] * s[:, 0, 1] * load / (1 - s[:, 1, 1] * load)


def forward_one_port(calibration: CalibrationRecord) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Port 1's reflection terms of a two-port calibration (for one-port use of port 1)."""
    return one_port_terms(calibration, "forward.")

