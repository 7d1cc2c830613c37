"""Decision rules for an upper limit (ILAC-G8:09/2019, "Guidelines on Decision Rules and
Statements of Conformity", §4.2).

- simple acceptance (§4.2.1, binary, guard band w = 0): pass when the measured value is
  within the limit, fail otherwise.
- guard-banded acceptance (§4.2.3, non-binary, w = U, the expanded uncertainty): pass when
  value + U is within the limit; fail when value - U is beyond it; otherwise
  "indeterminate" -- too close to the limit to say (ILAC-G8's conditional pass and
  conditional fail, which a production line treats alike).
- binary guard band (§4.2.2, w = U): pass when value + U is within the limit, fail otherwise
  (the producer carries the risk near the limit).

A device's record carries the text of the rule used (:data:`RULE_TEXT`).
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from lineproof.values import Verdict

DecisionRule = Literal["simple", "guard-banded", "guard-banded-binary"]

RULE_TEXT = {
    "simple": "simple acceptance, ILAC-G8:09/2019 4.2.1 (binary, no guard band)",
    "guard-banded": "guard-banded acceptance, ILAC-G8:09/2019 4.2.3 (non-binary, guard band w = U; "
                    "indeterminate = conditional pass or conditional fail)",
    "guard-banded-binary": "guard-banded acceptance, ILAC-G8:09/2019 4.2.2 (binary, guard band w = U)",
}


def judge_upper_limit(
    values: np.ndarray, limit: float, expanded_uncertainty: np.ndarray | None, rule: DecisionRule
) -> Verdict:
    """Judge every point of a band against an upper limit; the band's verdict is the worst.

    Under a guard-banded rule a band passes only if every point passes with its guard band;
    under the non-binary rule it fails as soon as one point fails beyond doubt.
    """
    if rule not in RULE_TEXT:
        raise ValueError(f"unknown decision rule {rule!r}; use one of {', '.join(RULE_TEXT)}")
    values = np.asarray(values, dtype=float)
    if rule == "simple":
        return Verdict.PASS if bool(np.all(values <= limit)) else Verdict.FAIL
    if expanded_uncertainty is None:
        raise ValueError("guard-banded acceptance needs an expanded uncertainty")
    u = np.asarray(expanded_uncertainty, dtype=float)
    if bool(np.all(values + u <= limit)):
        return Verdict.PASS
    if rule == "guard-banded-binary" or bool(np.any(values - u > limit)):
        return Verdict.FAIL
    return Verdict.INDETERMINATE


def judge_extremes(worst: float, limit: float, rule: DecisionRule, worst_upper: float | None = None,
                   worst_lower: float | None = None) -> Verdict:
    """:func:`judge_upper_limit` from a band's extremes, when the caller has them already:
    the largest value, the largest value + U and the largest value - U (every point is within
    a limit exactly when the largest is, so the verdicts are the same)."""
    if rule not in RULE_TEXT:
        raise ValueError(f"unknown decision rule {rule!r}; use one of {', '.join(RULE_TEXT)}")
    if rule == "simple":
        return Verdict.PASS if worst <= limit else Verdict.FAIL
    if worst_upper is None or worst_lower is None:
        raise ValueError("guard-banded acceptance needs an expanded uncertainty")
    if worst_upper <= limit:
        return Verdict.PASS
    if rule == "guard-banded-binary" or worst_lower > limit:
        return Verdict.FAIL
    return Verdict.INDETERMINATE
