"""Decision rules of ILAC-G8:09/2019 for an upper limit."""

from __future__ import annotations

import numpy as np
import pytest

from lineproof.decision import RULE_TEXT, judge_upper_limit
from lineproof.metrics import reflection_from_vswr
from lineproof.uncertainty import termination_bound
from lineproof.values import Verdict


@pytest.mark.parametrize(("value", "u", "expected"), [
    (0.80, 0.10, Verdict.PASS),            # value + U within the limit: pass (§4.2.3, w = U)
    (0.95, 0.10, Verdict.INDETERMINATE),   # inside the limit, but not by U
    (1.05, 0.10, Verdict.INDETERMINATE),   # beyond the limit, but not by U
    (1.15, 0.10, Verdict.FAIL),            # value - U beyond the limit: fail
])
def test_guard_banded_acceptance(value: float, u: float, expected: Verdict) -> None:
    assert judge_upper_limit(np.array([value]), 1.0, np.array([u]), "guard-banded") is expected


def test_simple_acceptance_ignores_the_uncertainty() -> None:
    assert judge_upper_limit(np.array([0.95]), 1.0, np.array([0.1]), "simple") is Verdict.PASS
    assert judge_upper_limit(np.array([1.05]), 1.0, None, "simple") is Verdict.FAIL
    with pytest.raises(ValueError, match="needs an expanded uncertainty"):
        judge_upper_limit(np.array([0.5]), 1.0, None, "guard-banded")


def test_one_failing_point_fails_the_band_and_one_doubtful_point_makes_it_indeterminate() -> None:
    u = np.full(3, 0.01)
    assert judge_upper_limit(np.array([0.5, 0.5, 1.2]), 1.0, u, "guard-banded") is Verdict.FAIL
    assert judge_upper_limit(np.array([0.5, 0.995, 0.5]), 1.0, u, "guard-banded") is Verdict.INDETERMINATE


def test_a_reading_of_1_34_against_1_35_with_a_1_01_termination_is_not_a_clear_pass() -> None:
    # The case that motivates guard bands: a 1.34:1 reading, a 1.35:1 limit, a termination of
    # 1.01:1 on the output.  The termination alone may move the reading by up to
    # (1 - |Γ|²) |ΓL| / (1 - |ΓL|) (passive reciprocal device), more than the margin.
    reading, limit = float(reflection_from_vswr(1.34)), float(reflection_from_vswr(1.35))
    reach = float(termination_bound(np.array([reading]), float(reflection_from_vswr(1.01)))[0])
    assert limit - reading < reach
    assert judge_upper_limit(np.array([reading]), limit, np.array([reach]), "guard-banded") is Verdict.INDETERMINATE


def test_binary_guard_band_fails_what_it_cannot_pass() -> None:
    # ILAC-G8:09/2019 4.2.2: pass below the acceptance limit TL - w, fail above it.
    u = np.array([0.1])
    assert judge_upper_limit(np.array([0.85]), 1.0, u, "guard-banded-binary") is Verdict.PASS
    assert judge_upper_limit(np.array([0.95]), 1.0, u, "guard-banded-binary") is Verdict.FAIL


def test_rule_text_names_the_clause() -> None:
    # ILAC-G8:09/2019 §4.2.1 simple acceptance, §4.2.2 binary and §4.2.3 non-binary guard band.
    assert "ILAC-G8:09/2019" in RULE_TEXT["guard-banded"] and "4.2.3" in RULE_TEXT["guard-banded"]
    assert "4.2.2" in RULE_TEXT["guard-banded-binary"] and "4.2.1" in RULE_TEXT["simple"]
    with pytest.raises(ValueError, match="unknown decision rule"):
        judge_upper_limit(np.array([0.5]), 1.0, None, "lenient")  # type: ignore[arg-type]
