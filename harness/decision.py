"""Decision rules for an upper limit (ILAC-G8:09/2019, "Guidelines on Decision Rules and
Statements of Conformity").

- simple acceptance (ILAC-G8 §4.2.1, a guard band w = 0): pass when the measured value is
  within the limit, fail otherwise.
- guard-banded acceptance (ILAC-G8 §4.2.2 with w = U, the expanded uncertainty at k = 2):
  pass when value + U is within the limit; fail when value - U is beyond it; otherwise the
  result is indeterminate -- too close to the limit to say.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from lineproof.values import Verdict

DecisionRule = Literal["simple", "guard-banded"]

RULE_TEXT = {
    "simple": "simple acceptance, ILAC-G8:09/2019 4.2.1 (no guard band)",
    "guard-banded": "guard-banded acceptance, ILAC-G8:09/2019 4.2.2 (guard band w = U, k = 2)",
}


def judge_upper_limit(
    values: np.ndarray, limit: float, expanded_uncertainty: np.ndarray | None, rule: DecisionRule
) -> Verdict:
    """Judge every point of a band against an upper limit; the band's verdict is the worst.

    Under the guard-banded rule a band passes only if every point passes with its guard
    band, and fails as soon as one point fails beyond doubt.
    """
    values = np.asarray(values, dtype=float)
    if rule == "simple" or expanded_uncertainty is None:
        if rule != "simple":
            raise ValueError("guard-banded acceptance needs an expanded uncertainty")
        return Verdict.PASS if bool(np.all(values <= limit)) else Verdict.FAIL
    u = np.asarray(expanded_uncertainty, dtype=float)
    if bool(np.any(values - u > limit)):
        return Verdict.FAIL
    if bool(np.all(values + u <= limit)):
        return Verdict.PASS
    return Verdict.INDETERMINATE
