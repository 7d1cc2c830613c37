"""Formulas exactly as they were before they were restructured for speed (lineproof at commit
b677442): the uncertainty of a corrected reflection and of |S21|, the 12-term correction and
the band figures.  Kept only so that tests/unit/test_restructured_formulas.py can prove the
restructured ones give the same results.  Not used by lineproof itself."""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from lineproof import metrics
from lineproof.two_port import s_matrix
from lineproof.uncertainty import (
    _COVERAGE_TABLE,
    _SHARES,
    _SPREADS,
    ReflectionUncertainty,
    UncertaintySettings,
    estimate_trace_noise,
)

_PAIRS = ((0, 0), (1, 1), (2, 2), (0, 1), (0, 2), (1, 2))


def _pair_products(vector: np.ndarray, conjugate: bool) -> list[np.ndarray]:
    left = np.conj(vector) if conjugate else vector
    return [left[:, j] * vector[:, k] for j, k in _PAIRS]


def _form(matrix: np.ndarray, products: list[np.ndarray], hermitian: bool) -> np.ndarray:
    """Σ_jk v̄_j M_jk v_k (Hermitian M, real result) or Σ_jk v_j M_jk v_k (symmetric M) from
    the six pair products: the diagonal once, each off-diagonal pair twice."""
    diagonal = sum(matrix[:, j, j] * products[i] for i, (j, _) in enumerate(_PAIRS[:3]))
    off = sum(matrix[:, j, k] * products[i + 3] for i, (j, k) in enumerate(_PAIRS[3:]))
    if hermitian:
        return diagonal.real + 2 * off.real
    return diagonal + 2 * off


def _quadratic_forms(residuals: Mapping[str, np.ndarray], prefix: str,
                     vector: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Variance, pseudo-variance and the load standard's variance of the residual error at
    each point (zeros when the calibration has no residual model)."""
    variance = residuals.get(f"{prefix}.variance")
    if variance is None:
        zero = np.zeros(vector.shape[0])
        return zero, zero.astype(complex), zero
    mixed = _pair_products(vector, conjugate=True)
    load = residuals.get(f"{prefix}.load_variance")
    return (_form(variance, mixed, True),
            _form(residuals[f"{prefix}.pseudo_variance"], _pair_products(vector, conjugate=False), False),
            np.zeros(vector.shape[0]) if load is None else _form(load, mixed, True))



def termination_bound(gamma: np.ndarray, termination_rms: np.ndarray | float) -> np.ndarray:
    """Largest change of an as-terminated input reflection from a termination of reflection
    ρL: |S21 S12 ρL / (1 - S22 ρL)| <= (1 - |S11|²) ρL / (1 - ρL) for a passive reciprocal
    device (|S21|² <= 1 - |S11|², |S22| <= 1)."""
    rho = np.minimum(np.asarray(termination_rms, dtype=float), 0.999)
    return (1 - np.minimum(np.abs(gamma), 1.0) ** 2) * rho / (1 - rho)


def termination_rms(reflection: np.ndarray, standard_uncertainty: np.ndarray) -> np.ndarray:
    """What is known of a qualified termination's |ΓL|: its measured value with the
    uncertainty of measuring it, as the RMS sqrt(|ΓLm|² + 2u²) (u the radial standard
    uncertainty; the error taken as of unknown phase)."""
    return np.sqrt(np.abs(reflection) ** 2 + 2 * np.asarray(standard_uncertainty) ** 2)


def _radial(v: np.ndarray, w: np.ndarray, turn: np.ndarray) -> np.ndarray:
    return np.sqrt(np.maximum(0.5 * (v + (w * turn).real), 0.0))


def reflection_uncertainty(
    residuals: Mapping[str, np.ndarray],
    gamma: np.ndarray,
    frequencies_hz: np.ndarray,
    settings: UncertaintySettings,
    termination_reach: np.ndarray | float | None = None,
    interpolation_error: float | None = None,
    transmission: tuple[np.ndarray, np.ndarray] | None = None,
    prefix: str = "port1",
) -> ReflectionUncertainty:
    """Uncertainty of the corrected reflection ``gamma`` at each point.

    ``termination_reach``: the (RMS) reflection of the termination on the device's output in
    an as-terminated measurement (:func:`termination_rms`); ``transmission``: (S21 S12, load
    match) of full two-port data, whose corrected S11 also carries the residual load match
    (p(ELF), reaching S11 through S21 S12).  The coverage factor is 2 unless a contribution of
    unknown phase dominates (then from :func:`coverage_factor`), or ``settings.coverage_factor``."""
    g = np.asarray(gamma, dtype=complex)
    f = np.asarray(frequencies_hz, dtype=float)
    vector = np.stack([np.ones_like(g), g, g * g], axis=-1)
    if transmission is not None:
        product, load_match = transmission
        vector = vector + product[:, None] * np.stack([np.ones_like(g), load_match, load_match**2], axis=-1)
    power = np.abs(g) ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        turn = np.where(power > 0, np.conj(g) ** 2 / power, 1.0)  # e^(-2j arg Γ)
    v, w, load_v = _quadratic_forms(residuals, prefix, vector)
    calibration = _radial(v, w, turn)
    load = np.minimum(np.sqrt(np.maximum(load_v, 0.0) / 2), calibration)
    budget = {"calibration (load standard)": load,
              "calibration (other standards)": np.sqrt(np.maximum(calibration**2 - load**2, 0.0))}
    noise = settings.trace_noise if settings.trace_noise is not None else estimate_trace_noise(g)
    budget["noise"] = np.full(f.shape, noise)
    if settings.connection_repeatability:
        reach = np.abs(1 - g * g) if transmission is None else np.abs(1 - g * g) + np.abs(transmission[0])
        budget["connection"] = settings.repeatability(f) * reach / math.sqrt(2)
    spread = residuals.get(f"{prefix}.load_spread")
    bounded = [(load, 1.0 if spread is None else float(spread[0].real))]
    if termination_reach is not None:
        budget["termination"] = termination_bound(g, termination_reach) / math.sqrt(2)
        bounded.append((budget["termination"], 1.0))
    if interpolation_error:
        budget["interpolation"] = np.full(f.shape, interpolation_error / math.sqrt(2))
        bounded.append((budget["interpolation"], 1.0))
    total = np.sqrt(sum(part**2 for part in budget.values()))
    return ReflectionUncertainty(np.abs(g), total, _coverage(bounded, total, settings), budget)


def _coverage(bounded: list[tuple[np.ndarray, float]], total: np.ndarray,
              settings: UncertaintySettings) -> np.ndarray:
    """Per point: the stated coverage factor, or that of the largest contribution of unknown
    phase (each with its magnitude spread; the others counted as normal, which errs on the
    wide side)."""
    if settings.coverage_factor is not None:
        return np.full(total.shape, settings.coverage_factor)
    parts = np.stack([part for part, _ in bounded])
    largest = np.argmax(parts, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(total > 0, np.max(parts, axis=0) / total, 0.0)
    factor = np.empty(total.shape)
    for index, (_, spread) in enumerate(bounded):
        chosen = largest == index
        if np.any(chosen):
            factor[chosen] = np.interp(share[chosen], _SHARES, _coverage_row(spread))
    return factor


def _coverage_row(spread: float) -> np.ndarray:
    """The table's row for a magnitude spread (linear between the tabulated spreads)."""
    position = min(max(spread, 0.0), 1.0) * (_SPREADS.size - 1)
    low = min(int(position), _SPREADS.size - 2)
    weight = position - low
    return _COVERAGE_TABLE[low] * (1 - weight) + _COVERAGE_TABLE[low + 1] * weight


def transmission_uncertainty_db(
    residuals: Mapping[str, np.ndarray],
    s: np.ndarray,
    settings: UncertaintySettings,
    noise: float | None = None,
) -> np.ndarray:
    """Expanded uncertainty (dB) of |S21| of full two-port data: thru statement (tracking),
    residual source match at port 1 times S11 and residual load match (the port-1 residual
    directivity it was measured with) times S22, and noise; first order, the complex relative
    error taken as of unknown phase except the tracking's magnitude part."""
    s11, s21, s22 = s[:, 0, 0], s[:, 1, 0], s[:, 1, 1]
    magnitude = residuals.get("transmission.magnitude_variance", np.zeros(s21.shape)).real
    mismatch = np.zeros(s21.shape)
    variance = residuals.get("port1.variance")
    if variance is not None:
        mismatch = variance[:, 2, 2].real * np.abs(s11) ** 2 + variance[:, 0, 0].real * np.abs(s22) ** 2
    sigma = noise if noise is not None else (settings.trace_noise or estimate_trace_noise(s21))
    relative = np.sqrt(magnitude + 0.5 * mismatch + (sigma / np.maximum(np.abs(s21), 1e-12)) ** 2)
    return (settings.coverage_factor or 2.0) * 20 / math.log(10) * relative


def correct_two_port(terms: Mapping[str, np.ndarray], raw: np.ndarray) -> np.ndarray:
    edf, esf, erf, elf, etf, exf = (terms[f"forward.{t}"] for t in TERMS)
    edr, esr, err, elr, etr, exr = (terms[f"reverse.{t}"] for t in TERMS)
    n11 = (raw[:, 0, 0] - edf) / erf
    n21 = (raw[:, 1, 0] - exf) / etf
    n12 = (raw[:, 0, 1] - exr) / etr
    n22 = (raw[:, 1, 1] - edr) / err
    product = n21 * n12
    forward = 1 + n11 * esf   # 1 + N11 ESF
    reverse = 1 + n22 * esr   # 1 + N22 ESR
    through_load = product * elf
    inverse = 1 / (forward * reverse - through_load * elr)
    return s_matrix(
        (n11 * reverse - through_load) * inverse,
        n21 * (reverse - n22 * elf) * inverse,
        n12 * (forward - n11 * elr) * inverse,
        (n22 * forward - elr * product) * inverse,
    )


TERMS = ("directivity", "source_match", "reflection_tracking", "load_match", "transmission_tracking", "isolation")


def band_indices(frequencies_hz: np.ndarray, band: object) -> np.ndarray:
    return np.flatnonzero(metrics.band_mask(frequencies_hz, band))  # type: ignore[arg-type]
