"""Control charts of a check standard's history, and the run rules that catch slow drift.

Method: NIST/SEMATECH e-Handbook of Statistical Methods, chapter 2 ("Measurement Process
Characterization"): §2.3.5.2 (control of bias and long-term variability: a Shewhart chart of
the check standard's values with t-based limits) and §2.2.3.1 (control chart for standard
deviations: the F-based precision limit).  Each verification of a check standard gives, per
figure (here a band's mean |Γ| of the check standard), a value -- the mean of its J repeated
measurements -- and, when J >= 2, their standard deviation.

**One point per calibration.**  Checks made with the same calibration share its error: they
are not independent draws of the process the chart watches, whose "occasions" (the
handbook's days) are calibrations here.  So the chart takes one check per calibration wherever
it needs independent points -- the baseline and the run rules -- and every check only where a
single check is judged on its own (the limits and the precision chart).

- **Baseline** (§2.2.2.2 for the notation, §2.3.5.2 for the limits): the first check that
  agreed with its reference of each of the first K calibrations gives the accepted value
  C̄ = mean and the process (level-2) standard deviation s2 with K - 1 degrees of freedom;
  their standard deviations, pooled, give the repeatability (level-1) standard deviation s1
  with K(J - 1) degrees of freedom (§2.2.3.2; the pooling is checked against the handbook's
  own example in §2.4.4.4).
- **Mean chart** (§2.3.5.2): limits C̄ ± t(1 - α/2; K - 1)·s2, the Student t quantile, so that
  a short baseline widens the limits as it should.  α = 0.0027 by default: the false-alarm
  rate of the classical 3-sigma limits under normality, reached by the factor as K grows.
  Every check is judged against them; a point beyond them **fails** the check.
- **Precision chart** (§2.2.3.1): UCL = s1·sqrt(F(α; J - 1, K(J - 1))), the upper α point of
  the F distribution (the handbook suggests a small α, "say 0.05"; 0.01 here).  Every check is
  judged against it: the repeats of one check share their calibration's error, which cancels
  out of their standard deviation, so s1 and each check's s measure reconnection and noise
  only and need no per-calibration thinning.  A signal is a **warning** (see below).
- **Run rules** for what a single point does not show -- slow drift: the Western Electric
  rules (Western Electric Co., *Statistical Quality Control Handbook*, 1956; also listed in the
  e-Handbook §6.3.2, from memory) -- 2 of 3 successive points beyond 2 s2 on one side, 4 of 5
  beyond 1 s2 on one side, 8 successive points on one side of the centre line -- and Nelson's
  trend test, 6 points in a row steadily rising or falling (L. S. Nelson, "The Shewhart
  Control Chart -- Tests for Special Causes", J. Quality Technology 16(4), 1984, test 3).
  They are judged on the series of the calibrations after the baseline's, each represented by
  its latest check and the check being judged last, so that they see the drift from one
  calibration to the next that the limits do not yet show.  A signal is a **warning**: the
  calibration no longer holds and is made again, but the results measured with it are not put
  in doubt -- no point has left the limits.  The series starts afresh after a signal of the
  mean chart (the corrective action -- a new calibration -- ends the run that led to it).

Pure functions on numbers; scipy gives the t and F quantiles.
"""

from __future__ import annotations

import math
from collections.abc import Hashable, Sequence
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
#: The one signal that fails a check (and puts the results since the last passing check in
#: doubt); every other signal is a warning that ends the calibration.
FAILING_SIGNALS = (BEYOND_LIMITS,)


@dataclass(frozen=True)
class ChartPoint:
    """One verification's figure: the mean of its repeats and their standard deviation, and
    the calibration it was made with (None: a point independent of every other)."""

    value: float
    std_dev: float | None = None
    repeats: int = 1
    calibration: str | None = None


def _occasion(index: int, point: ChartPoint) -> Hashable:
    """What a point shares its error with: its calibration, or nothing but itself."""
    return ("calibration", point.calibration) if point.calibration is not None else ("point", index)


def baseline_indices(points: Sequence[ChartPoint], count: int, usable: Sequence[bool] | None = None) -> list[int]:
    """The points that make the baseline: the first usable point of each of the first
    ``count`` calibrations (fewer while the history is shorter)."""
    flags = list(usable) if usable is not None else [True] * len(points)
    chosen: list[int] = []
    seen: set[Hashable] = set()
    for index, (point, ok) in enumerate(zip(points, flags, strict=True)):
        occasion = _occasion(index, point)
        if ok and occasion not in seen and len(chosen) < count:
            seen.add(occasion)
            chosen.append(index)
    return chosen


def occasions(points: Sequence[ChartPoint], usable: Sequence[bool] | None = None) -> int:
    """How many calibrations (independent occasions) the usable ``points`` come from."""
    return len(baseline_indices(points, len(points), usable))


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
    """k = t(1 - α/2; count - 1): the e-Handbook's t-based factor (§2.3.5.2) for limits from a
    baseline of ``count`` values."""
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
    """The rules the last of ``values`` breaks: the limits, then the run rules on the series as
    given (one value per calibration, the one judged last)."""
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

    @property
    def fails(self) -> bool:
        """The point fails its check: it lies beyond the control limits."""
        return any(s in FAILING_SIGNALS for s in self.signals or ())


def judge_series(points: Sequence[ChartPoint], baseline_count: int, alpha: float = DEFAULT_ALPHA,
                 precision_alpha: float = DEFAULT_PRECISION_ALPHA,
                 usable: Sequence[bool] | None = None) -> tuple[Baseline | None, list[PointJudgement]]:
    """Judge every point of a history in order (see the module docstring).  The baseline is
    the first usable point (``usable``: the check agreed with its reference; default all) of
    each of the first ``baseline_count`` calibrations, and no point up to the last of them is
    judged -- a check that disagreed with its reference never sets the limits.  Each later point
    is judged against the limits and, with repeats, the precision chart on its own, and by the
    run rules on the series of later calibrations (each by its latest point, this one last)
    since the last signal of the mean chart."""
    if baseline_count < 2:
        raise ValueError("a baseline needs at least two verifications")
    chosen = baseline_indices(points, baseline_count, usable)
    if len(chosen) < baseline_count:
        return None, [PointJudgement(p, None) for p in points]
    base = make_baseline([points[i] for i in chosen], alpha)
    in_baseline = {_occasion(i, points[i]) for i in chosen}
    end = chosen[-1] + 1
    judged = [PointJudgement(p, None) for p in points[:end]]
    latest: dict[Hashable, float] = {}  # a calibration's latest value, in the order last seen
    for index in range(end, len(points)):
        point = points[index]
        occasion = _occasion(index, point)
        if occasion in in_baseline:
            series = [point.value]  # a baseline calibration's later check: its limits only
        else:
            latest.pop(occasion, None)
            latest[occasion] = point.value
            series = list(latest.values())
        signals = list(run_rule_signals(series, base))
        if signals:
            latest = {}
        limit = base.precision_limit(point.repeats, precision_alpha)
        if limit is not None and point.std_dev is not None and point.std_dev > limit:
            signals.append(SPREAD_TOO_WIDE)
        judged.append(PointJudgement(point, tuple(signals)))
    return base, judged
