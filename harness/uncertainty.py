"""Uncertainty of a corrected reflection, per frequency point, and the published mismatch
formulas it rests on.

Method: the GUM (JCGM 100:2008) law of propagation of uncertainty, applied to the
complex-valued error of a corrected reflection as EURAMET cg-12 v3.0 (2018), "Guidelines on
the Evaluation of Vector Network Analysers", describes: after a one-port calibration the
corrected value Γc of a device of true reflection Γ carries the residual errors

    Γc - Γ ≈ D + τ Γ + M Γ²          (residual directivity, tracking, source match)

and the device's own connection, the termination on its output, and trace noise add to it.
The residual terms come from the kit's statement of how far its actual standards are from
their models.  To first order the residual polynomial p(Γ) = D + τΓ + MΓ² takes, at each
standard's model value Γ_i, minus that standard's deviation δ_i (the calibration makes the
actual standard read as its model), so p = -Σ δ_i L_i(Γ) with L_i the Lagrange polynomials
on the nodes Γ_i (the least-squares analogue for more than three standards).  Every input
quantity x (a delay, a capacitance, a phase, the load's reflection, a connection) moves its
standard by δ = s·x and so p by -s·x·L_i; its coefficient vector c = -s ℓ_i (three complex
numbers per frequency) and its variance build

    A = Σ E|x|² c̄ cᵀ       (the error's variance is v^H A v,          v = (1, Γ, Γ²))
    B = Σ E[x²]  c cᵀ      (its pseudo-variance is vᵀ B v; zero for an input of unknown phase)

stored with the calibration ("port1.variance", "port1.pseudo_variance").  The magnitude
|Γ| moves with the error's component along Γ: u²(|Γ|) = ½ (V + Re(W e^(-2j arg Γ))) (GUM
Supplement 2, JCGM 102:2011, for the two-dimensional output, projected).  Inputs of unknown
phase and known magnitude a are U-shaped in projection, u = a/√2 (I. A. Harris and F. L.
Warner, "Re-examination of mismatch uncertainty when measuring microwave power and
attenuation", IEE Proc. H 128(1), 1981); worst-case limits of a real quantity are
rectangular, u = a/√3 (GUM 4.3.7).  The expanded uncertainty is U = k u with k = 2, except
where one contribution of unknown phase and bounded magnitude dominates: its short-tailed
distribution sets k (GUM G.6.5-G.6.6; EA-4/02 M:2013 §5), see :func:`coverage_factor`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from lineproof.calkit import CalKit, StandardDefinition, ideal_reflection, varied
from lineproof.metrics import vswr_from_reflection
from lineproof.two_port_residuals import ThroughPath

LOAD_INPUT = "load reflection"
#: Step for the numerical sensitivity of a standard's model to one of its values.
_DELAY_STEP_S = 1e-14
_RELATIVE_STEP = 1e-6
_INDUCTANCE_STEP_H = 1e-14


@dataclass(frozen=True)
class UncertaintySettings:
    """What the station knows beyond the kit: connector repeatability (from a repeatability
    study: the RMS |Γ| a reconnection adds, at ``repeatability_reference_hz``, taken to grow
    in proportion to frequency) and the trace noise of a corrected reflection (standard
    deviation of each of its real and imaginary parts; None: estimated from the data)."""

    connection_repeatability: float = 0.0
    repeatability_reference_hz: float = 1e9
    trace_noise: float | None = None
    #: None: k = 2, or the factor of a dominant contribution of unknown phase (see
    #: :func:`coverage_factor`); a number fixes k.
    coverage_factor: float | None = None
    #: |Γ| of the small fixed mismatch at each end of each switch path (the switch's data
    #: sheet): standards, terminations and devices reached through different paths differ by it.
    switch_path_mismatch: float = 0.0
    #: Largest |Γ| of the analyzer's uncorrected source match at port 1 and load match at port 2
    #: (its data sheet; None: not stated): what a thru-response calibration leaves uncorrected
    #: (see :mod:`lineproof.normalization`).
    raw_source_match: float | None = None
    raw_load_match: float | None = None

    def repeatability(self, frequencies_hz: np.ndarray) -> np.ndarray:
        return self.connection_repeatability * np.asarray(frequencies_hz, dtype=float) / self.repeatability_reference_hz

    def connection_variance(self, frequencies_hz: np.ndarray) -> np.ndarray:
        """E|c|² of the reflection a connection adds: connector repeatability and, through a
        switch, the path's own fixed mismatch at each of its two ends (each path differs)."""
        return self.repeatability(frequencies_hz) ** 2 + 2 * self.switch_path_mismatch**2

    @property
    def connections(self) -> bool:
        return bool(self.connection_repeatability or self.switch_path_mismatch)


@dataclass(frozen=True, eq=False)
class InputQuantity:
    """One input of the residual model: how far it moves its standard (``sensitivity``, per
    unit of x), E|x|² (``variance``), and whether x is real (else of unknown phase)."""

    name: str
    sensitivity: np.ndarray
    variance: np.ndarray | float
    real: bool


def load_reflection_variance(kit: CalKit) -> float:
    """E|δ|² of the actual load's reflection: the worst figure's |Γ|² (its phase unknown:
    U-shaped in projection), or -- when the kit gives a best figure too -- the mean of |Γ|²
    over return losses spread evenly between the two."""
    statement = kit.uncertainty
    worst = statement.load_return_loss_db
    best = statement.load_return_loss_best_db
    if best is None or best == worst:
        return 10 ** (-worst / 10)
    # mean of 10^(-x/10) for x uniform on [worst, best]
    return (10 ** (-worst / 10) - 10 ** (-best / 10)) * 10 / math.log(10) / (best - worst)


def load_spread(kit: CalKit) -> float:
    """Smallest over largest |Γ| of the actual loads (1: the worst figure exactly)."""
    statement = kit.uncertainty
    if statement.load_return_loss_best_db is None:
        return 1.0
    return 10 ** (-(statement.load_return_loss_best_db - statement.load_return_loss_db) / 20)


def _derivative(standard: StandardDefinition, f: np.ndarray, z0: float, **changes: object) -> np.ndarray:
    return (ideal_reflection(varied(standard, **changes), f, z0) - ideal_reflection(standard, f, z0))


def standard_inputs(kit: CalKit, kind: str, frequencies_hz: np.ndarray, settings: UncertaintySettings) -> list[InputQuantity]:
    """The input quantities that move the actual ``kind`` standard away from its model."""
    f = np.asarray(frequencies_hz, dtype=float)
    statement = kit.uncertainty
    model = kit.ideal(kind, f)
    standard = kit.standard(kind)
    z0 = kit.reference_impedance_ohm
    inputs: list[InputQuantity] = []
    if kind == "load":
        inputs.append(InputQuantity(LOAD_INPUT, np.ones(f.shape, complex), load_reflection_variance(kit), False))
    else:
        phase = statement.open_phase_deg if kind == "open" else statement.short_phase_deg
        if phase:
            inputs.append(InputQuantity(f"{kind} phase", 1j * model, (math.radians(phase) / math.sqrt(3)) ** 2, True))
        delay = statement.open_delay_uncertainty_s if kind == "open" else statement.short_delay_uncertainty_s
        if delay and standard.data is None:
            step = _derivative(standard, f, z0, offset_delay_s=standard.offset_delay_s + _DELAY_STEP_S) / _DELAY_STEP_S
            inputs.append(InputQuantity(f"{kind} offset delay", step, delay**2, True))
        if kind == "open" and statement.open_capacitance_uncertainty and standard.data is None:
            scaled = tuple(c * (1 + _RELATIVE_STEP) for c in standard.coefficients)
            step = _derivative(standard, f, z0, coefficients=scaled) / _RELATIVE_STEP
            inputs.append(InputQuantity("open capacitance", step, statement.open_capacitance_uncertainty**2, True))
        if kind == "short" and statement.short_inductance_uncertainty_h and standard.data is None:
            c = standard.coefficients
            moved = (c[0] + _INDUCTANCE_STEP_H, c[1], c[2], c[3])
            step = _derivative(standard, f, z0, coefficients=moved) / _INDUCTANCE_STEP_H
            inputs.append(InputQuantity("short inductance", step, statement.short_inductance_uncertainty_h**2, True))
    if settings.connections:
        # A connector interface as a small impedance step: S11 = c, S22 = -c, S21 S12 = 1 - c²
        # (the scattering matrix of a step between two lines; D. M. Pozar, Microwave
        # Engineering, from memory), which moves a reflection Γ by c (1 - Γ²) to first order.
        inputs.append(InputQuantity(f"{kind} connection", 1 - model**2, settings.connection_variance(f), False))
    if settings.trace_noise:
        inputs.append(InputQuantity(f"{kind} noise", np.ones(f.shape, complex), 2 * settings.trace_noise**2, False))
    return inputs


def _node_weights(nodes: np.ndarray) -> np.ndarray:
    """Coefficients (N, 3, n) of the polynomials through the nodes (N, n): column i holds
    (a0, a1, a2) of the quadratic taking 1 at node i and 0 at the others (least squares for
    n > 3)."""
    vandermonde = np.stack([np.ones_like(nodes), nodes, nodes * nodes], axis=-1)
    if nodes.shape[-1] == 3:
        return np.linalg.inv(vandermonde)
    return np.linalg.pinv(vandermonde)


def residual_model(kit: CalKit, kinds: tuple[str, ...], frequencies_hz: np.ndarray,
                   settings: UncertaintySettings, prefix: str = "port1") -> dict[str, np.ndarray]:
    """The calibration's residual-error model (A and B above) for one port calibrated with
    the kit's ``kinds`` standards."""
    f = np.asarray(frequencies_hz, dtype=float)
    nodes = np.stack([kit.ideal(kind, f) for kind in kinds], axis=-1)
    weights = _node_weights(nodes)
    variance = np.zeros(f.shape + (3, 3), dtype=complex)
    pseudo = np.zeros(f.shape + (3, 3), dtype=complex)
    load = np.zeros(f.shape + (3, 3), dtype=complex)
    for index, kind in enumerate(kinds):
        for quantity in standard_inputs(kit, kind, f, settings):
            c = -quantity.sensitivity[:, None] * weights[:, :, index]
            outer = np.asarray(quantity.variance)[..., None, None]
            term = outer * np.conj(c)[:, :, None] * c[:, None, :]
            variance += term
            if quantity.name == LOAD_INPUT:
                load += term
            if quantity.real:
                pseudo += outer * c[:, :, None] * c[:, None, :]
    # Column-major: each (j, k) entry contiguous over frequency, for the speed of _form.
    return {f"{prefix}.variance": np.asfortranarray(variance), f"{prefix}.pseudo_variance": np.asfortranarray(pseudo),
            f"{prefix}.load_variance": np.asfortranarray(load),
            f"{prefix}.load_spread": np.full(f.shape, load_spread(kit), complex)}


def transmission_model(kit: CalKit, frequencies_hz: np.ndarray, settings: UncertaintySettings) -> dict[str, np.ndarray]:
    """Relative variance of the transmission tracking a thru leaves: its delay (phase only
    moves the phase of S21), its loss statement, and the thru connection."""
    f = np.asarray(frequencies_hz, dtype=float)
    statement = kit.uncertainty
    phase = (2 * np.pi * f * statement.thru_delay_uncertainty_s) ** 2
    magnitude = np.full(f.shape, statement.thru_loss_uncertainty**2)
    connection = 2 * settings.connection_variance(f)
    thru = kit.thru(f)
    return {"transmission.magnitude_variance": (magnitude + connection / 2).astype(complex),
            "transmission.phase_variance": (phase + connection / 2).astype(complex),
            # the thru's model, which carries the residuals into S11 and S22 (see ThroughPath)
            "thru.s11": thru[:, 0, 0].astype(complex), "thru.s21s12": (thru[:, 1, 0] * thru[:, 0, 1]).astype(complex),
            "thru.s22": thru[:, 1, 1].astype(complex)}


def add_specified_residuals(residuals: Mapping[str, np.ndarray], prefix: str, directivity: np.ndarray | float,
                            tracking: np.ndarray | float, source_match: np.ndarray | float) -> dict[str, np.ndarray]:
    """Add residual terms stated as bounds of unknown phase -- |ΔΓ| <= D + T|Γ| + M|Γ|², from
    an analyzer's corrected-performance data or from a check standard (see
    :func:`residuals_from_check_standard`) -- to a calibration's residual model."""
    combined = {name: np.array(value) for name, value in residuals.items()}
    variance = combined[f"{prefix}.variance"]
    for index, bound in enumerate((directivity, tracking, source_match)):
        variance[:, index, index] += np.asarray(bound, dtype=float) ** 2
    return combined


def residuals_from_check_standard(known: np.ndarray, measured: np.ndarray, expected_u: np.ndarray,
                                  coverage: float = 2.0) -> np.ndarray:
    """The residual bound a check standard calls for: where its observed deviation
    |Γm - Γknown| exceeds k times the model's standard uncertainty u there, the missing
    standard uncertainty u_x = sqrt((|ΔΓ|/k)² - u²) is put on D, T and M alike (bounds of
    unknown phase, |ΔΓ| <= D + T|Γ| + M|Γ|² style): D = T = M = √2 u_x / sqrt(1 + |Γ|² + |Γ|⁴),
    so that the widened interval reaches the observed deviation at the check standard (|Γ|
    taken as the smaller of its known and read values, where the widening is least).
    Returns that common bound per point (zero where the model already explains the check)."""
    g = np.minimum(np.abs(known), np.abs(measured))
    needed = (np.abs(measured - known) / coverage) ** 2
    missing = np.sqrt(np.maximum(needed - np.asarray(expected_u) ** 2, 0.0))
    return math.sqrt(2) * missing / np.sqrt(1 + g**2 + g**4)


def _vector(gamma: np.ndarray, gamma_squared: np.ndarray,
            path: ThroughPath | None) -> tuple[np.ndarray | None, np.ndarray, np.ndarray]:
    """The components (v0, v1, v2) of the vector the residual coefficients (D, τ, M) multiply:
    (1, Γ, Γ²) for a one-port reading (v0 None: exactly 1); with full two-port data, see
    :meth:`lineproof.two_port_residuals.ThroughPath.vector`."""
    if path is None:
        return None, gamma, gamma_squared
    return path.vector(gamma, gamma_squared)


def _power(values: np.ndarray) -> np.ndarray:
    """|z|² computed as re² + im² (what z̄ z gives, without the complex product); on a
    contiguous array by squaring its float64 view in one pass (the same numbers, 0.7 of the time)."""
    if values.dtype != np.complex128 or not values.flags.c_contiguous:
        return values.real * values.real + values.imag * values.imag
    parts = values.view(np.float64)
    parts = parts * parts
    return np.add(parts[0::2], parts[1::2])


def _hermitian_form(matrix: np.ndarray, squares: tuple[np.ndarray | float, np.ndarray, np.ndarray],
                    crosses: tuple[np.ndarray, np.ndarray, np.ndarray]) -> np.ndarray:
    """vᴴMv = Σ_j M_jj |v_j|² + 2 Re Σ_{j<k} M_jk v̄_j v_k for a Hermitian M (real result),
    from |v_j|² and the three products v̄_j v_k (j < k)."""
    off = matrix[:, 0, 1] * crosses[0]
    off += matrix[:, 0, 2] * crosses[1]
    off += matrix[:, 1, 2] * crosses[2]
    result = matrix[:, 1, 1].real * squares[1]
    result += matrix[:, 2, 2].real * squares[2]
    result += matrix[:, 0, 0].real * squares[0]
    result += 2 * off.real
    return result


def _symmetric_form(matrix: np.ndarray, v0: np.ndarray | None, v1: np.ndarray, v2: np.ndarray) -> np.ndarray:
    """vᵀMv = Σ_j M_jj v_j² + 2 Σ_{j<k} M_jk v_j v_k for a symmetric M, grouped as
    v0 (M00 v0 + 2 (M01 v1 + M02 v2)) + v1 (M11 v1 + 2 M12 v2) + M22 v2²."""
    first = matrix[:, 0, 1] * v1
    first += matrix[:, 0, 2] * v2
    first *= 2
    second = matrix[:, 1, 2] * v2
    second *= 2
    second += matrix[:, 1, 1] * v1
    second *= v1
    last = matrix[:, 2, 2] * v2
    last *= v2
    if v0 is None:
        first += matrix[:, 0, 0]
    else:
        first += matrix[:, 0, 0] * v0
        first *= v0
    first += second
    first += last
    return first


def _quadratic_forms(residuals: Mapping[str, np.ndarray], prefix: str, v0: np.ndarray | None, v1: np.ndarray,
                     v2: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Variance vᴴAv, pseudo-variance vᵀBv and the load standard's variance of the residual
    error at each point (zeros when the calibration has no residual model).  Written out
    term by term (A and B are Hermitian and symmetric 3 x 3 per point), which costs a third
    of forming the nine products of v̄_j v_k and summing them."""
    variance = residuals.get(f"{prefix}.variance")
    if variance is None:
        return np.zeros(v1.shape[0]), np.zeros(v1.shape[0], complex), np.zeros(v1.shape[0])
    if v0 is None:
        squares: tuple[np.ndarray | float, np.ndarray, np.ndarray] = (1.0, _power(v1), _power(v2))
        crosses = (v1, v2, np.conj(v1) * v2)
    else:
        conjugate = np.conj(v0)
        squares = (_power(v0), _power(v1), _power(v2))
        crosses = (conjugate * v1, conjugate * v2, np.conj(v1) * v2)
    load = residuals.get(f"{prefix}.load_variance")
    return (_hermitian_form(variance, squares, crosses),
            _symmetric_form(residuals[f"{prefix}.pseudo_variance"], v0, v1, v2),
            np.zeros(v1.shape[0]) if load is None else _hermitian_form(load, squares, crosses))


def estimate_trace_noise(trace: np.ndarray) -> float:
    """Standard deviation of each part (real, imaginary) of white noise on a smooth trace,
    from its second differences (Var(x[i-1] - 2x[i] + x[i+1]) = 6σ²), robustly (median
    of |second difference|, whose distribution is Rayleigh for complex normal noise).  A trace
    that is not smooth at the point spacing makes it larger, never smaller."""
    values = np.asarray(trace, dtype=complex)
    if values.size < 5:
        return 0.0
    second = values[1:-1] * 2
    np.subtract(values[:-2], second, out=second)
    second += values[2:]
    # |second| is Rayleigh with scale sqrt(6)σ; its median is that scale times sqrt(2 ln 2).
    return float(_median(np.abs(second)) / (math.sqrt(6) * math.sqrt(2 * math.log(2))))


def _median(values: np.ndarray) -> float:
    """np.median of a 1-D array (which it reorders), by one partition in place (half the time)."""
    middle = values.size // 2
    values.partition((middle - 1, middle) if values.size % 2 == 0 else middle)
    if np.isnan(np.max(values[middle:])):  # partition puts NaNs after the middle; np.median gives NaN
        return math.nan
    if values.size % 2:
        return float(values[middle])
    return float((values[middle - 1] + values[middle]) / 2)


#: Coverage factor for the coverage probability of k = 2 under a normal distribution
#: (95.45 %) when one contribution of unknown phase dominates: X = r·Y + sqrt(1 - r²)·Z with
#: Y the projection of a vector of magnitude spread evenly over [m·a, a] and uniform phase
#: (scaled to unit variance), Z standard normal, r = u(Y)/u(X).  Rows m = 0, 0.2, ... 1;
#: columns r = 0, 0.05, ... 1.  Computed by numerical integration over Y (4000 phases x 200
#: magnitudes) and root finding; tests/unit/test_uncertainty.py checks it by Monte Carlo.
#: GUM G.6.5-G.6.6 and EA-4/02 M:2013 §5: with a dominant non-normal contribution the
#: coverage factor follows its distribution (1.41 for a pure U-shape).
_SPREADS = np.array([0.0, 0.2, 0.4, 0.6, 0.8, 1.0])
_SHARES = np.linspace(0.0, 1.0, 21)
_COVERAGE_TABLE = np.array([
    (2.000, 2.000, 2.000, 2.000, 2.000, 2.000, 2.000, 2.000, 1.999, 1.999, 1.999, 1.999, 1.999, 1.999, 1.999, 2.000, 2.002, 2.004, 2.006, 2.009, 2.024),
    (2.000, 2.000, 2.000, 2.000, 2.000, 2.000, 1.999, 1.999, 1.998, 1.997, 1.994, 1.991, 1.987, 1.982, 1.974, 1.964, 1.951, 1.934, 1.913, 1.888, 1.869),
    (2.000, 2.000, 2.000, 2.000, 2.000, 2.000, 1.999, 1.998, 1.997, 1.995, 1.991, 1.986, 1.979, 1.969, 1.955, 1.937, 1.912, 1.880, 1.837, 1.781, 1.717),
    (2.000, 2.000, 2.000, 2.000, 2.000, 1.999, 1.999, 1.998, 1.996, 1.993, 1.989, 1.983, 1.974, 1.962, 1.944, 1.921, 1.890, 1.847, 1.789, 1.706, 1.582),
    (2.000, 2.000, 2.000, 2.000, 2.000, 1.999, 1.999, 1.998, 1.996, 1.993, 1.988, 1.982, 1.972, 1.958, 1.939, 1.914, 1.879, 1.832, 1.766, 1.667, 1.473),
    (2.000, 2.000, 2.000, 2.000, 2.000, 1.999, 1.999, 1.998, 1.996, 1.993, 1.988, 1.981, 1.971, 1.957, 1.938, 1.912, 1.876, 1.828, 1.760, 1.657, 1.411),
])  # fmt: skip


def coverage_factor(share: np.ndarray, spread: float) -> np.ndarray:
    """Coverage factor for a dominant contribution of unknown phase with standard-uncertainty
    ``share`` r of the total and magnitude spread m (linear in the table above)."""
    return np.interp(np.clip(np.asarray(share, dtype=float), 0.0, 1.0), _SHARES, _coverage_row(spread))


@dataclass(frozen=True, eq=False)
class ReflectionUncertainty:
    """|Γ| per point with its standard uncertainty, coverage factor (per point), the interval
    and a budget (standard uncertainty of |Γ| from each source)."""

    magnitude: np.ndarray
    standard_uncertainty: np.ndarray
    coverage_factor: np.ndarray
    budget: Mapping[str, np.ndarray] = field(default_factory=dict)

    @property
    def expanded(self) -> np.ndarray:
        return self.coverage_factor * self.standard_uncertainty

    @property
    def lower(self) -> np.ndarray:
        return np.maximum(self.magnitude - self.expanded, 0.0)

    @property
    def upper(self) -> np.ndarray:
        return np.minimum(self.magnitude + self.expanded, 1.0)

    def vswr_interval(self) -> tuple[np.ndarray, np.ndarray]:
        return vswr_from_reflection(self.lower), vswr_from_reflection(self.upper)


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


def reflection_uncertainty(
    residuals: Mapping[str, np.ndarray],
    gamma: np.ndarray,
    frequencies_hz: np.ndarray,
    settings: UncertaintySettings = UncertaintySettings(),
    termination_reach: np.ndarray | float | None = None,
    interpolation_error: float | None = None,
    transmission: ThroughPath | None = None,
    prefix: str = "port1",
    reading: np.ndarray | None = None,
    further: Mapping[str, np.ndarray] | None = None,
) -> ReflectionUncertainty:
    """Uncertainty of the corrected reflection ``gamma`` at each point.

    ``termination_reach``: the (RMS) reflection of the termination on the device's output in
    an as-terminated measurement (:func:`termination_rms`); ``transmission``: how full
    two-port data carry the residuals into a corrected S11 (:class:`ThroughPath`, see
    :func:`_vector`).  ``reading``: the figure whose magnitude is
    reported when it is not ``gamma`` itself but lies close to it (an as-terminated reflection
    computed from S11): the residual error sits on ``gamma``, its radial part is taken along
    the reading.  ``further``: more standard uncertainties of |Γ| (of a normal kind), by name.
    The coverage factor is 2 unless a contribution of unknown phase dominates (then from
    :func:`coverage_factor`), or ``settings.coverage_factor``."""
    g = np.asarray(gamma, dtype=complex)
    f = np.asarray(frequencies_hz, dtype=float)
    g2 = g * g
    v0, v1, v2 = _vector(g, g2, transmission)
    read = g if reading is None else np.asarray(reading, dtype=complex)
    magnitude = np.abs(read)
    v, w, load_v = _quadratic_forms(residuals, prefix, v0, v1, v2)
    v += _along(w, g2 if reading is None else read * read, magnitude)
    v *= 0.5
    variance = np.maximum(v, 0.0, out=v)  # of |Γ| from the calibration's residuals
    calibration = np.sqrt(variance)
    load = np.maximum(load_v, 0.0, out=load_v)  # in place here and below: load_v and others are fresh arrays
    load /= 2
    load = np.minimum(np.sqrt(load, out=load), calibration, out=load)
    others = load * load
    np.subtract(variance, others, out=others)
    others = np.sqrt(np.maximum(others, 0.0, out=others), out=others)
    budget = {"calibration (load standard)": load, "calibration (other standards)": others}
    noise = settings.trace_noise if settings.trace_noise is not None else estimate_trace_noise(g)
    budget["noise"] = np.full(f.shape, noise)
    total_variance = variance + noise * noise  # load² + others² = the calibration's variance
    if settings.connections:
        reach = np.abs(1 - g2)
        if transmission is not None:
            # the connection at the device's far port reaches S11 through S21 S12, and the
            # thru's own connection through the load match it gave (K = 1 - v0, see _vector)
            # sqrt(a² + b²) rather than np.hypot (a third of its time; no overflow at these sizes)
            reach += np.abs(transmission.product)
            reach *= reach
            thru_reach = _power(1 - v0)  # type: ignore[operator]
            reach += thru_reach
            reach = np.sqrt(reach, out=reach)
        if settings.switch_path_mismatch:
            reach *= np.sqrt(settings.connection_variance(f) / 2)
        else:
            reach *= f
            reach *= settings.connection_repeatability / (settings.repeatability_reference_hz * math.sqrt(2))
        budget["connection"] = reach
        total_variance += reach * reach
    spread = residuals.get(f"{prefix}.load_spread")
    bounded = [(load, 1.0 if spread is None else float(spread[0].real))]
    if termination_reach is not None:
        budget["termination"] = termination_bound(read, termination_reach) / math.sqrt(2)
        bounded.append((budget["termination"], 1.0))
        total_variance += budget["termination"] ** 2
    if interpolation_error:
        budget["interpolation"] = np.full(f.shape, interpolation_error / math.sqrt(2))
        bounded.append((budget["interpolation"], 1.0))
        total_variance += interpolation_error**2 / 2
    for name, part in (further or {}).items():
        budget[name] = part
        total_variance += part * part
    total = np.sqrt(total_variance, out=total_variance)
    return ReflectionUncertainty(magnitude, total, _coverage(bounded, total, settings), budget)


def _along(pseudo_variance: np.ndarray, gamma_squared: np.ndarray, magnitude: np.ndarray) -> np.ndarray:
    """Re(W e^(-2j arg Γ)) = Re(W conj(Γ²)) / |Γ|² (Re W where Γ = 0): the pseudo-variance's
    share along Γ."""
    power = magnitude * magnitude
    turned = pseudo_variance.real * gamma_squared.real  # Re(W conj(Γ²)) = Re W Re Γ² + Im W Im Γ²
    turned += pseudo_variance.imag * gamma_squared.imag
    if power.all():
        turned /= power
        return turned
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(power > 0, turned / power, pseudo_variance.real)


def _coverage(bounded: list[tuple[np.ndarray, float]], total: np.ndarray,
              settings: UncertaintySettings) -> np.ndarray:
    """Per point: the stated coverage factor, or that of the largest contribution of unknown
    phase (each with its magnitude spread; the others counted as normal, which errs on the
    wide side)."""
    if settings.coverage_factor is not None:
        return np.full(total.shape, settings.coverage_factor)
    with np.errstate(divide="ignore", invalid="ignore"):
        if len(bounded) == 1:  # one contribution of unknown phase: no choosing to do
            part, spread = bounded[0]
            share = part / total
            if not (total > 0).all():
                share = np.where(total > 0, share, 0.0)
            return np.interp(share, _SHARES, _coverage_row(spread))
        parts = np.stack([part for part, _ in bounded])
        largest = np.argmax(parts, axis=0)
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
    settings: UncertaintySettings = UncertaintySettings(),
    noise: float | None = None,
) -> np.ndarray:
    """Expanded uncertainty (dB) of |S21| of full two-port data ``s`` (N, 2, 2); see
    :func:`transmission_uncertainty_traces_db`."""
    return transmission_uncertainty_traces_db(residuals, s[:, 0, 0], s[:, 1, 0], s[:, 1, 1], settings, noise)


def transmission_uncertainty_traces_db(
    residuals: Mapping[str, np.ndarray],
    s11: np.ndarray,
    s21: np.ndarray,
    s22: np.ndarray,
    settings: UncertaintySettings = UncertaintySettings(),
    noise: float | None = None,
    s21_magnitude: np.ndarray | None = None,
) -> np.ndarray:
    """Expanded uncertainty (dB) of |S21|: :func:`transmission_relative_uncertainty` times k
    (2, or ``settings.coverage_factor``) in dB."""
    relative = transmission_relative_uncertainty(residuals, s11, s21, s22, settings, noise, s21_magnitude)
    relative *= (settings.coverage_factor or 2.0) * 20 / math.log(10)
    return relative


def transmission_relative_uncertainty(
    residuals: Mapping[str, np.ndarray],
    s11: np.ndarray,
    s21: np.ndarray,
    s22: np.ndarray,
    settings: UncertaintySettings = UncertaintySettings(),
    noise: float | None = None,
    s21_magnitude: np.ndarray | None = None,
) -> np.ndarray:
    """Relative standard uncertainty of |S21|: thru statement (tracking), residual source
    match at port 1 times S11 and residual load match (the port-1 residual directivity it
    was measured with) times S22, and noise; first order, the complex relative error taken
    as of unknown phase except the tracking's magnitude part.  ``s21_magnitude``: |S21| when
    the caller has it already."""
    magnitude = residuals.get("transmission.magnitude_variance")
    sigma = noise if noise is not None else (settings.trace_noise or estimate_trace_noise(s21))
    through = np.abs(s21) if s21_magnitude is None else s21_magnitude
    total = np.maximum(through, 1e-12)
    np.divide(sigma, total, out=total)
    total *= total  # (σ / |S21|)²
    variance = residuals.get("port1.variance")
    if variance is not None:  # in place: half the passes of the plain expression
        mismatch = _power(s11)
        mismatch *= variance[:, 2, 2].real
        far = _power(s22)
        far *= variance[:, 0, 0].real
        mismatch += far
        mismatch *= 0.5
        total += mismatch
    if magnitude is not None:
        total += magnitude.real
    return np.sqrt(total, out=total)


def transmission_phase_uncertainty(
    residuals: Mapping[str, np.ndarray],
    s11: np.ndarray,
    s21: np.ndarray,
    s22: np.ndarray,
    settings: UncertaintySettings = UncertaintySettings(),
    interpolation_error: float | None = None,
) -> np.ndarray:
    """Standard uncertainty (rad) of the phase of S21: the first-order relative error of S21
    is that of :func:`transmission_relative_uncertainty`, and its imaginary part turns the
    phase -- the thru's delay and connection (the tracking's phase part), the residual match
    terms and noise (of unknown phase: half their variance each way), and a moved
    calibration's interpolation estimate."""
    phase = residuals.get("transmission.phase_variance", np.zeros(s21.shape)).real
    mismatch: np.ndarray | float = 0.0
    variance = residuals.get("port1.variance")
    if variance is not None:
        mismatch = variance[:, 2, 2].real * _power(s11) + variance[:, 0, 0].real * _power(s22)
    sigma = settings.trace_noise if settings.trace_noise is not None else estimate_trace_noise(s21)
    return np.sqrt(phase + 0.5 * mismatch + (sigma / np.maximum(np.abs(s21), 1e-12)) ** 2
                   + (interpolation_error or 0.0) ** 2 / 2)


# -- published mismatch formulas -------------------------------------------------------------

def mismatch_limits_db(reflection_1: float, reflection_2: float) -> tuple[float, float]:
    """Worst-case mismatch error limits of a power transfer between two reflections of
    unknown phase: 20 log10(1 + |Γ1||Γ2|) and 20 log10(1 - |Γ1||Γ2|) dB."""
    product = reflection_1 * reflection_2
    return 20 * math.log10(1 + product), 20 * math.log10(1 - product)


def mismatch_standard_uncertainty(reflection_1: float, reflection_2: float) -> float:
    """Standard uncertainty of that mismatch (relative, in amplitude): |Γ1||Γ2| / √2,
    U-shaped (Harris and Warner 1981)."""
    return reflection_1 * reflection_2 / math.sqrt(2)


def cascaded_vswr_bounds(vswr_1: float, vswr_2: float) -> tuple[float, float]:
    """Worst-case range of the VSWR of two mismatches in cascade, phases unknown:
    from the larger divided by the smaller to their product."""
    larger, smaller = max(vswr_1, vswr_2), min(vswr_1, vswr_2)
    return larger / smaller, larger * smaller
