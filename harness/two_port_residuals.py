"""How a calibration's residual errors reach a corrected S11 (or S22) of full two-port data.

After a one-port calibration the corrected reflection carries the residual polynomial
p(Γ) = D + τΓ + MΓ² (EURAMET cg-12 v3.0; see :mod:`lineproof.uncertainty`), and the
uncertainty of a reading is a quadratic form in the vector v that (D, τ, M) multiply: (1, Γ, Γ²).
With full two-port data p acts twice, to first order: on the reading through port 1,
Γin = S11 + S21 S12 L / (1 - S22 L) with L the analyzer's load match at port 2, and -- with the
opposite sign, scaled -- on the load match the thru gave, δL = p(Γthru) (1 - t22 L)² / (t21 t12)
with Γthru = t11 + t21 t12 L / (1 - t22 L), which S11's correction removes as
S21 S12 δL / (1 - S22 L)².  So δS11 = p(Γin) - K p(Γthru), K = S21 S12 (1 - t22 L)² /
((1 - S22 L)² t21 t12), and v = (1 - K, Γin - K Γthru, Γin² - K Γthru²): a device like the thru
reads as the thru was defined (K = 1, Γin = Γthru), whatever the residuals.  Left out: the
residuals' effect on the estimated S21 S12 (times L) and the other port's residuals (through
S22 L).  tests/unit/test_two_port_residuals.py holds this against the 12-term correction itself.

Imports nothing of ours but numpy, so that :mod:`lineproof.uncertainty` can use it.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, eq=False)
class ThruView:
    """The thru as one direction's load match L was found with, per point: the factor
    (1 - t22 L)² / (t21 t12) and its reading Γthru = t11 + t21 t12 L / (1 - t22 L).  The same
    for every device a calibration corrects: made once (:func:`thru_view`)."""

    factor: np.ndarray
    reading: np.ndarray


def thru_view(residuals: Mapping[str, np.ndarray], load_match: np.ndarray, seen_from_port2: bool = False) -> ThruView:
    """The :class:`ThruView` of a calibration's direction, from the thru's model it kept
    (``thru.*`` residual arrays; a flush thru when it kept none); ``seen_from_port2``: for
    S22, the thru turned round."""
    if "thru.s21s12" not in residuals:  # flush: t11 = t22 = 0, t21 t12 = 1
        return ThruView(np.ones(np.shape(load_match), complex), np.asarray(load_match, complex))
    near, far = ("thru.s22", "thru.s11") if seen_from_port2 else ("thru.s11", "thru.s22")
    t11, t21t12, t22 = residuals[near], residuals["thru.s21s12"], residuals[far]
    inverse = 1 / (1 - t22 * load_match)
    return ThruView(1 / (inverse * inverse * t21t12), t11 + t21t12 * load_match * inverse)


@dataclass(frozen=True, eq=False)
class ThroughPath:
    """What carries the calibration's residual errors into a corrected S11 of full two-port
    data (or into S22, seen from port 2): S21 S12 of the device, the reflection of its far
    port, the analyzer's load match at that port, and the thru that load match was found
    with."""

    product: np.ndarray
    far_reflection: np.ndarray
    load_match: np.ndarray
    thru: ThruView

    def vector(self, gamma: np.ndarray, gamma_squared: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(1 - K, Γin - K Γthru, Γin² - K Γthru²) for the corrected reading ``gamma`` (and its square)."""
        inverse = self.far_reflection * self.load_match
        np.subtract(1, inverse, out=inverse)
        np.reciprocal(inverse, out=inverse)  # 1 / (1 - S22 L)
        reading = self.product * self.load_match
        reading *= inverse
        reading += gamma
        scale = self.product * self.thru.factor
        scale *= inverse
        scale *= inverse
        scaled = scale * self.thru.reading
        first = reading - scaled
        reading *= reading
        reading -= scaled * self.thru.reading
        return 1 - scale, first, reading


def through_path(residuals: Mapping[str, np.ndarray], product: np.ndarray, far_reflection: np.ndarray,
                 load_match: np.ndarray, seen_from_port2: bool = False, thru: ThruView | None = None) -> ThroughPath:
    """The :class:`ThroughPath` of a reading (``thru``: the calibration's :func:`thru_view`,
    made here when not given)."""
    return ThroughPath(product, far_reflection, load_match,
                       thru if thru is not None else thru_view(residuals, load_match, seen_from_port2))
