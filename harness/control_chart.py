"""Control charts of a check standard's history, and the run rules that catch slow drift.

Method: NIST/SEMATECH e-Handbook of Statistical Methods, chapter 2 ("Measurement Process
Characterization"), §2.2.2 (bias and long-term variability: a Shewhart chart of the check
standard's values) and §2.2.3 (short-term variability: a chart of the standard deviations of
repeated measurements).  Each verification of a check standard gives, per figure (here a
band's mean |Γ| of the check standard), a value -- the mean of its J repeated measurements --
and, when J >= 2, their standard deviation.

- **Baseline** (§2.1.2.3, §2.2.2.2): the first K values give the accepted value
  Ȳ = mean and the process (level-2) standard deviation s2 with K - 1 degrees of freedom;
  their standard deviations, pooled, give the repeatability (level-1) standard deviation s1
  with K(J - 1) degrees of freedom (§2.2.3.2; the pooling is checked against the handbook's
  own example in §2.4.4.4).
- **Mean chart**: limits Ȳ ± k·s2 with k = t(1 - α/2; K - 1), the Student t quantile, so that a
  short baseline widens the limits as it should.  α = 0.0027 by default: the false-alarm rate
  of the classical 3-sigma limits under normality, reached by k as K grows.
- **Precision chart** (§2.2.3.1): UCL = s1·sqrt(F(α; J - 1, K(J - 1))), the upper α point of
  the F distribution (the handbook suggests a small α, "say 0.05"; 0.01 here, since a signal
  on a line means a new calibration).
- **Run rules** for what a single point does not show -- slow drift: the Western Electric
  rules (Western Electric Co., *Statistical Quality Control Handbook*, 1956; also listed in the
  e-Handbook §6.3.2, from memory) -- 2 of 3 successive points beyond 2 s2 on one side, 4 of 5
  beyond 1 s2 on one side, 8 successive points on one side of the centre line -- and Nelson's
  trend test, 6 points in a row steadily rising or falling (L. S. Nelson, "The Shewhart
  Control Chart -- Tests for Special Causes", J. Quality Technology 16(4), 1984, test 3).
  The rules look at the points after the baseline, and start counting afresh after a signal
  (the corrective action -- a new calibration -- ends the run of points that led to it).

Pure functions on numbers; scipy gives the t and F quantiles.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

#: Two-sided false-alarm probability of the mean chart's limits (that of ±3 sigma, normal).
DEFAULT_ALPHA = 0.0027
#: Upper-tail probability of the precision chart's limit.
DEFAULT_PRECISION_ALPHA = 0.01
#: No chart is tighter than this (|Γ|): a baseline of identical values (a noiseless bench)
#: would otherwise call every later digit a signal.
SIGMA_FLOOR = 1e-7

BEYOND_LIMITS = "beyond the control limits"
TWO_OF_THREE = "2 of 3 successive points beyond 2 s on one side (Western Electric)"
FOUR_OF_FIVE = "4 of 5 successive points beyond 1 s on one side (Western Electric)"
EIGHT_ON_ONE_SIDE = "8 successive points on one side of the centre line (Western Electric)"
SIX_TRENDING = "6 points in a row steadily rising or falling (Nelson test 3)"
SPREAD_TOO_WIDE = "short-term standard deviation above its limit (precision chart)"


@dataclass(frozen=True)
class ChartPoint:
    """One verification's figure: the mean of its repeats and their standard deviation."""

    value: float
    std_dev: float | None = None
    repeats: int = 1


@dataclass(frozen=True)
class Baseline:
    """What the first K points establish: the centre line, the process standard deviation,
    the limit factor, and the pooled repeatability for the precision chart."""

    count: int
    center: float
    process_std: float
    limit_factor: float
    pooled_std: float | None = None
    pooled_dof: int = 0

    @property
    def lower(self) -> float:
        return self.center - self.limit_factor * self.process_std

    @property
    def upper(self) -> float:
        return self.center + self.limit_factor * self.process_std

    def precision_limit(self, repeats: int, alpha: float = DEFAULT_PRECISION_ALPHA) -> float | None:
        """UCL of a standard deviation of ``repeats`` measurements (None: no precision chart)."""
        if self.pooled_std is None or self.pooled_dof < 1 or repeats < 2:
            return None
        return precision_limit(self.pooled_std, repeats, self.pooled_dof, alpha)


def limit_factor(count: int, alpha: float = DEFAULT_ALPHA) -> float:
    """k = t(1 - α/2; count - 1): the e-Handbook's t-based factor for limits from a baseline
    of ``count`` values."""
    from scipy import stats

    if count < 2:
        raise ValueError("a baseline needs at least two values")
    return float(stats.t.ppf(1.0 - alpha / 2.0, count - 1))


def precision_limit(pooled_std: float, repeats: int, pooled_dof: int, alpha: float = DEFAULT_PRECISION_ALPHA) -> float:
    """UCL = s1·sqrt(F(α; J - 1, ν)) with ν the pooled degrees of freedom (e-Handbook §2.2.3.1)."""
    from scipy import stats

    return pooled_std * math.sqrt(float(stats.f.ppf(1.0 - alpha, repeats - 1, pooled_dof)))


def pooled_standard_deviation(std_devs: Sequence[float], dofs: Sequence[int]) -> tuple[float, int]:
    """sqrt(Σ ν_i s_i² / Σ ν_i) and Σ ν_i (e-Handbook §2.2.3.2)."""
    total = sum(dofs)
    if total < 1:
        raise ValueError("nothing to pool: no degrees of freedom")
    return math.sqrt(sum(n * s * s for s, n in zip(std_devs, dofs, strict=True)) / total), total


def make_baseline(points: Sequence[ChartPoint], alpha: float = DEFAULT_ALPHA) -> Baseline:
    """The baseline of ``points`` (all of them: pass the first K)."""
    count = len(points)
    values = [p.value for p in points]
    center = math.fsum(values) / count
    spread = math.sqrt(math.fsum((v - center) ** 2 for v in values) / (count - 1)) if count > 1 else 0.0
    repeated = [p for p in points if p.std_dev is not None and p.repeats >= 2]
    pooled, dof = (None, 0)
    if repeated:
        pooled, dof = pooled_standard_deviation([float(p.std_dev) for p in repeated],  # type: ignore[arg-type]
                                                [p.repeats - 1 for p in repeated])
    return Baseline(count, center, max(spread, SIGMA_FLOOR), limit_factor(count, alpha), pooled, dof)


def _same_side_beyond(deviations: Sequence[float], need: int, of: int, distance: float) -> bool:
    window = deviations[-of:]
    if len(window) < of:
        return False
    last = deviations[-1]
    if abs(last) <= distance:
        return False  # the rule is raised by the point that completes the pattern
    side = math.copysign(1.0, last)
    return sum(1 for d in window if d * side > distance) >= need


def _trending(values: Sequence[float], length: int = 6) -> bool:
    window = values[-length:]
    if len(window) < length:
        return False
    steps = [b - a for a, b in zip(window, window[1:], strict=False)]
    return all(s > 0 for s in steps) or all(s < 0 for s in steps)


def run_rule_signals(values: Sequence[float], baseline: Baseline) -> tuple[str, ...]:
    """The rules the last of ``values`` (the points since the baseline, or since the last
    signal) breaks."""
    if not values:
        return ()
    last = values[-1]
    signals = []
    if not baseline.lower <= last <= baseline.upper:
        signals.append(BEYOND_LIMITS)
    sigma = baseline.process_std
    deviations = [v - baseline.center for v in values]
    if _same_side_beyond(deviations, 2, 3, 2 * sigma):
        signals.append(TWO_OF_THREE)
    if _same_side_beyond(deviations, 4, 5, sigma):
        signals.append(FOUR_OF_FIVE)
    if len(deviations) >= 8 and (all(d > 0 for d in deviations[-8:]) or all(d < 0 for d in deviations[-8:])):
        signals.append(EIGHT_ON_ONE_SIDE)
    if _trending(values):
        signals.append(SIX_TRENDING)
    return tuple(signals)


@dataclass(frozen=True)
class PointJudgement:
    """A point of the chart: None signals while it belongs to the baseline (not judged)."""

    point: ChartPoint
    signals: tuple[str, ...] | None

    @property
    def judged(self) -> bool:
        return self.signals is not None

    @property
    def in_control(self) -> bool | None:
        return None if self.signals is None else not self.signals


def judge_series(points: Sequence[ChartPoint], baseline_count: int, alpha: float = DEFAULT_ALPHA,
                 precision_alpha: float = DEFAULT_PRECISION_ALPHA,
                 usable: Sequence[bool] | None = None) -> tuple[Baseline | None, list[PointJudgement]]:
    """Judge every point of a history in order: the first ``baseline_count`` usable points
    (``usable``: the check agreed with its reference; default all) form the baseline, and no
    point up to the last of them is judged -- a check that disagreed with its reference never
    sets the limits; each later point is judged against the limits, the run rules (counted
    from the last signal) and, with repeats, the precision chart."""
    if baseline_count < 2:
        raise ValueError("a baseline needs at least two verifications")
    flags = list(usable) if usable is not None else [True] * len(points)
    chosen = [i for i, ok in enumerate(flags) if ok][:baseline_count]
    if len(chosen) < baseline_count:
        return None, [PointJudgement(p, None) for p in points]
    base = make_baseline([points[i] for i in chosen], alpha)
    end = chosen[-1] + 1
    judged = [PointJudgement(p, None) for p in points[:end]]
    run: list[float] = []
    for point in points[end:]:
        run.append(point.value)
        signals = list(run_rule_signals(run, base))
        limit = base.precision_limit(point.repeats, precision_alpha)
        if limit is not None and point.std_dev is not None and point.std_dev > limit:
            signals.append(SPREAD_TOO_WIDE)
        judged.append(PointJudgement(point, tuple(signals)))
        if signals:
            run = []
    return base, judged
