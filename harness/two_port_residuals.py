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
class ThroughPath:
    """What carries the calibration's residual errors into a corrected S11 of full two-port
    data (or into S22, seen from port 2): S21 S12 of the device, the reflection of its far
    port, the analyzer's load match at that port, and the thru the load match was found with
    (its reflection facing this port, S21 S12 and its far reflection; None: a flush thru)."""

    product: np.ndarray
    far_reflection: np.ndarray
    load_match: np.ndarray
    thru: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None

    def vector(self, gamma: np.ndarray, gamma_squared: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(1 - K, Γin - K Γthru, Γin² - K Γthru²) for the corrected reading ``gamma`` (and its square)."""
        load = self.load_match
        near = 1 - self.far_reflection * load
        reading = gamma + self.product * load / near
        if self.thru is None:  # flush: t11 = t22 = 0, t21 t12 = 1
            scale, thru_reading = self.product / (near * near), load
        else:
            t11, t21t12, t22 = self.thru
            far = 1 - t22 * load
            scale = self.product * (far * far) / (near * near * t21t12)
            thru_reading = t11 + t21t12 * load / far
        scaled = scale * thru_reading
        return 1 - scale, reading - scaled, reading * reading - scaled * thru_reading


def through_path(residuals: Mapping[str, np.ndarray], product: np.ndarray, far_reflection: np.ndarray,
                 load_match: np.ndarray, seen_from_port2: bool = False) -> ThroughPath:
    """The :class:`ThroughPath` of a reading, with the calibration's thru model when it kept
    one (``thru.*`` residual arrays; a flush thru otherwise); ``seen_from_port2``: for S22,
    the thru turned round."""
    if "thru.s21s12" not in residuals:
        return ThroughPath(product, far_reflection, load_match)
    near, far = ("thru.s22", "thru.s11") if seen_from_port2 else ("thru.s11", "thru.s22")
    return ThroughPath(product, far_reflection, load_match, (residuals[near], residuals["thru.s21s12"], residuals[far]))
