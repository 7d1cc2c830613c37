"""Calibration math: choose a method, solve error terms from measured standards, apply them.

Pure functions on arrays and value types -- no instrument in sight.  Two-port methods live
in :mod:`lineproof.two_port`; persisted calibrations in :mod:`lineproof.calstore`.

One-port error model (three terms; Agilent AN 1287-3, "Applying Error Correction to Network
Analyzer Measurements", cited from memory)::

    Γm = e00 + e10e01 Γ / (1 - e11 Γ)      =>      Γ = (Γm - e00) / (e11 (Γm - e00) + e10e01)

With three standards the terms follow from the linear system (one row per standard)
Γm_i = e00 + Γ_i Γm_i e11 - Γ_i Δe, Δe = e00 e11 - e10e01, solved here for every frequency
at once; with more standards scikit-rf's ``OnePort`` (least squares) solves it.  The tests
check both against each other and against the textbook closed form for ideal standards.
Applying the terms uses the closed form above: exact, about a thousand times faster than
``OnePort.apply_cal`` at 10,001 points, correct at any reference impedance, and it refuses a
grid that differs from the calibration's instead of silently dropping frequencies.
"""

from __future__ import annotations

import itertools
import uuid
import warnings
from collections.abc import Collection, Mapping
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import TYPE_CHECKING

import numpy as np

from lineproof.errors import CalibrationError, InputError
from lineproof.values import CalibrationRecord, InstrumentIdentity, SweepPlan

if TYPE_CHECKING:
    from lineproof.calkit import CalKit

ONE_PORT_METHOD = "one-port (open, short, load)"
ONE_PATH_METHOD = "two-port one-path (forward only, reverse by reversing the device)"
FULL_TWO_PORT_METHOD = "full two-port SOLT (12-term)"
THRU_RESPONSE_METHOD = "thru response (transmission normalization)"
ONE_PORT_TERMS = ("directivity", "source_match", "reflection_tracking")

#: What each analyzer capability (profile ``capabilities.paths``) allows, best first.
METHODS_BY_PATHS = {
    "reflection": (ONE_PORT_METHOD,),
    "forward": (ONE_PATH_METHOD, THRU_RESPONSE_METHOD, ONE_PORT_METHOD),
    "full": (FULL_TWO_PORT_METHOD, ONE_PATH_METHOD, THRU_RESPONSE_METHOD, ONE_PORT_METHOD),
}
#: Short names a sequence may use to ask for a method.
METHOD_NAMES = {
    "one-port": ONE_PORT_METHOD,
    "one-path": ONE_PATH_METHOD,
    "solt": FULL_TWO_PORT_METHOD,
    "thru-response": THRU_RESPONSE_METHOD,
}

#: Largest condition number of the per-frequency standards matrix we accept.  Above it the
#: standards are too alike at some frequency (e.g. an open and a short a half-wave apart).
_MAX_CONDITION = 1e6
#: Two grids are the same grid when they agree to this relative tolerance.
_GRID_RTOL = 1e-9


def choose_method(paths: str, wanted: str | None = None) -> str:
    """The calibration method for an analyzer whose profile says ``paths``
    ("reflection" | "forward" | "full"): the best it allows, or ``wanted`` (a short name
    from :data:`METHOD_NAMES`) when the analyzer can do it."""
    if paths not in METHODS_BY_PATHS:
        raise CalibrationError(f"unknown analyzer paths {paths!r}; a profile says reflection, forward or full")
    allowed = METHODS_BY_PATHS[paths]
    if wanted is None:
        return allowed[0]
    if wanted not in METHOD_NAMES:
        raise CalibrationError(f"unknown calibration method {wanted!r}; use one of {', '.join(METHOD_NAMES)}")
    method = METHOD_NAMES[wanted]
    if method not in allowed:
        raise CalibrationError(
            f"the analyzer measures {paths} paths only, so it cannot do a {wanted} calibration; "
            f"it can do: {', '.join(k for k, v in METHOD_NAMES.items() if v in allowed)}")
    return method


def same_grid(a: np.ndarray, b: np.ndarray) -> bool:
    """Whether two frequency grids are the same grid (equal to a relative 1e-9)."""
    if a.shape != b.shape:
        return False
    # Equal arrays are the usual case and cost a fifth of the tolerant comparison.
    return bool(np.array_equal(a, b)) or bool(np.allclose(a, b, rtol=_GRID_RTOL, atol=0.0))


def require_grid(calibration: CalibrationRecord, frequencies_hz: np.ndarray) -> None:
    """Refuse data on a grid other than the calibration's (see :mod:`lineproof.calstore`
    for moving a calibration onto another grid)."""
    if not same_grid(np.asarray(frequencies_hz, dtype=float), calibration.frequencies_hz):
        raise CalibrationError(
            f"the sweep grid differs from the grid of calibration {calibration.calibration_id} "
            f"({calibration.plan.describe()}); calibrate again for this sweep, or move the "
            "calibration onto it with calstore.fit_to_sweep"
        )


def _standards_matrix(ideals: Mapping[str, np.ndarray], measured: Mapping[str, np.ndarray]) -> np.ndarray:
    return np.stack(
        [np.stack([np.ones_like(ideals[n]), ideals[n] * measured[n], -ideals[n]], axis=-1) for n in ideals],
        axis=-2,
    )


def _mhz(frequency_hz: float) -> str:
    return f"{frequency_hz / 1e6:.6g} MHz"


@dataclass(frozen=True)
class Inseparable:
    """Where a calibration's standards do not separate the three error terms: the worst
    frequency, its condition number, how many points are past the limit and over what span,
    and the two standards that are alike there -- by their models (a kit or sweep problem) or
    only by their raw readings (a connection problem)."""

    frequency_hz: float
    condition: float
    points: int
    span_hz: tuple[float, float]
    alike: tuple[str, str]
    by_model: bool
    distance: float

    def problem(self) -> str:
        first, last = self.span_hz
        span = "" if self.points == 1 else f"; {self.points} points from {_mhz(first)} to {_mhz(last)} are past {_MAX_CONDITION:.0e}"
        a, b = self.alike
        alike = (f"the models of the {a} and the {b} are alike there ({self.distance:.2g} apart)" if self.by_model
                 else f"the {a} and the {b} read alike there ({self.distance:.2g} apart) though their models differ")
        return (f"the standards do not separate the error terms at {_mhz(self.frequency_hz)} (condition number "
                f"{self.condition:.3g}{span}): {alike}")

    def fix(self, kit_source: str = "") -> str:
        kit = f"the kit file {kit_source}" if kit_source else "the kit definition"
        first, last = self.span_hz
        if self.by_model:
            where = _mhz(first) if self.points == 1 else f"{_mhz(first)} to {_mhz(last)}"
            return (f"sweep clear of {where}, or give the {self.alike[0]} or the {self.alike[1]} another offset delay "
                    f"so that their reflections differ over the whole sweep, and define it so in {kit}")
        return (f"connect the {self.alike[0]} and the {self.alike[1]} again, each when asked, and check that {kit} "
                "describes the standards in use")


def inseparable(frequencies_hz: np.ndarray, ideals: Mapping[str, np.ndarray],
                measured: Mapping[str, np.ndarray]) -> Inseparable | None:
    """None when the standards separate the three unknowns at every frequency, else where
    and why not.  The per-frequency system is Γm_i = e00 + Γ_i Γm_i e11 - Γ_i Δe (one row per
    standard); its matrix must be well conditioned at every frequency."""
    condition = np.linalg.cond(_standards_matrix(ideals, measured))
    bad = ~np.isfinite(condition) | (condition > _MAX_CONDITION)
    if not np.any(bad):
        return None
    worst = int(np.argmax(np.where(np.isfinite(condition), condition, np.inf)))
    f = np.asarray(frequencies_hz, dtype=float)
    names = list(ideals)
    spread_model = max(abs(ideals[a][worst] - ideals[b][worst]) for a, b in itertools.combinations(names, 2)) or 1.0
    spread_raw = max(abs(measured[a][worst] - measured[b][worst]) for a, b in itertools.combinations(names, 2)) or 1.0

    def nearness(pair: tuple[str, str]) -> tuple[float, bool, float]:
        model = abs(ideals[pair[0]][worst] - ideals[pair[1]][worst])
        raw = abs(measured[pair[0]][worst] - measured[pair[1]][worst])
        by_model = model / spread_model <= raw / spread_raw
        return min(model / spread_model, raw / spread_raw), by_model, float(model if by_model else raw)

    pair = min(itertools.combinations(names, 2), key=lambda p: nearness(p)[0])
    _, by_model, distance = nearness(pair)
    return Inseparable(float(f[worst]), float(condition[worst]), int(np.count_nonzero(bad)),
                       (float(f[bad][0]), float(f[bad][-1])), pair, by_model, distance)


def check_condition(frequencies_hz: np.ndarray, ideals: Mapping[str, np.ndarray],
                    measured: Mapping[str, np.ndarray], kit_source: str = "") -> None:
    """Refuse a solve whose standards do not separate the three unknowns (see
    :func:`inseparable`), naming the frequency, the standards that are alike, the kit file
    (``kit_source``, where known) and the fix."""
    trouble = inseparable(frequencies_hz, ideals, measured)
    if trouble is not None:
        kit = f" (kit file {kit_source})" if kit_source else ""
        raise CalibrationError(f"{trouble.problem()}{kit} -- fix: {trouble.fix(kit_source)}")


def check_kit_for_sweep(kit: CalKit, frequencies_hz: np.ndarray, kinds: Collection[str]) -> list[InputError]:
    """What stops ``kit``'s standards of ``kinds`` from calibrating over ``frequencies_hz``,
    found before anything is measured: data standards that cannot serve the sweep, and reflect
    standards whose models are alike somewhere in it (an ideal analyzer could not separate the
    terms there: the raw readings would be the models).  Each is an :class:`InputError` on the
    kit file, with the key and line of the standard concerned."""
    from lineproof.calkit import REFLECT_KINDS

    f = np.asarray(frequencies_hz, dtype=float)
    found: list[InputError] = []
    ideals: dict[str, np.ndarray] = {}
    for kind in kinds:
        try:
            if kind in REFLECT_KINDS:
                ideals[kit.standard(kind).name] = kit.ideal(kind, f)
            elif kind == "thru":
                kit.thru(f)
        except InputError as exc:
            found.append(exc)
    if len(ideals) == len(REFLECT_KINDS) and (trouble := inseparable(f, ideals, ideals)) is not None:
        key = f"standards.{trouble.alike[1]}"
        found.append(InputError(f"over this sweep {trouble.problem()}", path=kit.source, key=key,
                                line=kit.line_of(key), fix=trouble.fix(kit.source)))
    return found


def check_grid(name: str, grid_hz: np.ndarray, calibration_grid_hz: np.ndarray) -> None:
    """Refuse a standard measured on other frequencies than the calibration's grid (equal
    to a relative 1e-9, :func:`same_grid`), naming the first frequency that differs."""
    grid = np.asarray(grid_hz, dtype=float)
    if same_grid(grid, calibration_grid_hz):
        return
    if grid.shape != calibration_grid_hz.shape:
        found = f"{grid.size} points, the calibration grid has {calibration_grid_hz.size}"
    else:
        differs = ~np.isclose(grid, calibration_grid_hz, rtol=_GRID_RTOL, atol=0.0)
        first = int(np.argmax(differs))
        found = (f"{np.count_nonzero(differs)} of {grid.size} frequencies differ, the first at point {first + 1}: "
                 f"{grid[first]:.10g} Hz against the calibration grid's {calibration_grid_hz[first]:.10g} Hz")
    raise CalibrationError(f"standard {name} was measured on a different grid from the calibration's ({found}); "
                           "measure every standard with the same sweep plan")


def _check_standards(frequencies_hz: np.ndarray, measured: Mapping[str, np.ndarray],
                     ideals: Mapping[str, np.ndarray], grids: Mapping[str, np.ndarray] | None) -> None:
    missing = [name for name in ideals if name not in measured]
    if missing or len(ideals) < 3:
        raise CalibrationError(
            f"a one-port calibration needs three standards measured; missing {', '.join(missing) or 'standards'}"
        )
    for name in ideals:
        if measured[name].shape != frequencies_hz.shape or ideals[name].shape != frequencies_hz.shape:
            raise CalibrationError(
                f"standard {name} was measured on a different grid from the others "
                f"({measured[name].size} points, the calibration grid has {frequencies_hz.size}); "
                "measure every standard with the same sweep plan")
        if grids is not None and name in grids:
            check_grid(name, grids[name], frequencies_hz)


def solve_one_port(
    frequencies_hz: np.ndarray,
    measured: Mapping[str, np.ndarray],
    ideals: Mapping[str, np.ndarray],
    *,
    grids: Mapping[str, np.ndarray] | None = None,
    kit_source: str = "",
) -> dict[str, np.ndarray]:
    """Error terms from three or more one-port standards (measured raw and model ideal).
    ``grids``: the frequencies each standard was swept at, each refused unless it is
    ``frequencies_hz``; ``kit_source``: the kit file, named when the standards are refused."""
    f = np.asarray(frequencies_hz, dtype=float)
    _check_standards(f, measured, ideals, grids)
    check_condition(f, ideals, {name: measured[name] for name in ideals}, kit_source)
    if len(ideals) > 3:
        return _solve_least_squares(f, measured, ideals)
    matrix = _standards_matrix(ideals, measured)
    right = np.stack([measured[n] for n in ideals], axis=-1)
    e00, e11, delta = np.moveaxis(np.linalg.solve(matrix, right[..., None])[..., 0], -1, 0)
    return {"directivity": e00, "source_match": e11, "reflection_tracking": e00 * e11 - delta}


def _solve_least_squares(f: np.ndarray, measured: Mapping[str, np.ndarray],
                         ideals: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
    import skrf
    from skrf.calibration import OnePort

    frequency = skrf.Frequency.from_f(f, unit="Hz")
    names = list(ideals)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        calibration = OnePort(
            measured=[skrf.Network(frequency=frequency, s=measured[n], name=n) for n in names],
            ideals=[skrf.Network(frequency=frequency, s=ideals[n], name=n) for n in names],
        )
        calibration.run()
        coefs = calibration.coefs
    return {
        "directivity": np.asarray(coefs["directivity"]).reshape(-1),
        "source_match": np.asarray(coefs["source match"]).reshape(-1),
        "reflection_tracking": np.asarray(coefs["reflection tracking"]).reshape(-1),
    }


def make_record(
    method: str,
    terms: Mapping[str, np.ndarray],
    frequencies_hz: np.ndarray,
    plan: SweepPlan,
    instrument: InstrumentIdentity,
    kit_name: str,
    kit_hash: str,
    reference_impedance_ohm: float,
    residuals: Mapping[str, np.ndarray] | None = None,
    temperature_c: float | None = None,
) -> CalibrationRecord:
    now = datetime.now(UTC)
    return CalibrationRecord(
        calibration_id=f"cal-{now:%Y%m%dT%H%M%SZ}-{uuid.uuid4().hex[:6]}",
        method=method,
        kit_name=kit_name,
        kit_hash=kit_hash,
        created_utc=now.isoformat(timespec="seconds"),
        instrument=instrument,
        plan=plan,
        reference_impedance_ohm=reference_impedance_ohm,
        frequencies_hz=frequencies_hz,
        terms=terms,
        residuals=residuals or {},
        temperature_c=temperature_c,
    )


def one_port_terms(calibration: CalibrationRecord, prefix: str = "") -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(e00, e11, e10e01) of a one-port calibration, or of one direction of a two-port one
    (``prefix`` "forward." or "reverse.")."""
    names = [prefix + name for name in ONE_PORT_TERMS]
    missing = [name for name in names if name not in calibration.terms]
    if missing:
        raise CalibrationError(f"calibration {calibration.calibration_id} ({calibration.method}) lacks "
                               f"{', '.join(missing)}; it cannot correct this measurement")
    return calibration.terms[names[0]], calibration.terms[names[1]], calibration.terms[names[2]]


def correct_reflection(directivity: np.ndarray, source_match: np.ndarray, tracking: np.ndarray,
                       raw: np.ndarray) -> np.ndarray:
    """Γ = (Γm - e00) / (e11 (Γm - e00) + e10e01), element by element."""
    difference = np.asarray(raw) - directivity
    return difference / (source_match * difference + tracking)


def embed_reflection(directivity: np.ndarray, source_match: np.ndarray, tracking: np.ndarray,
                     gamma: np.ndarray) -> np.ndarray:
    """What a raw receiver reads for a true Γ: e00 + e10e01 Γ / (1 - e11 Γ)."""
    return directivity + tracking * gamma / (1 - source_match * gamma)


def correct_one_port(calibration: CalibrationRecord, frequencies_hz: np.ndarray, raw: np.ndarray) -> np.ndarray:
    """Corrected reflection from raw, on exactly the calibration's grid."""
    require_grid(calibration, frequencies_hz)
    prefix = "" if "directivity" in calibration.terms else "forward."
    return correct_reflection(*one_port_terms(calibration, prefix), raw)
