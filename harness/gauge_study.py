"""The repeatability study: how much of a tolerance the measurement itself takes.

n devices are each measured r times with a fresh connection every time, by k operators (or
once, by the run's operator).  The k dimension is operators only: a study runs on one station,
so reproducibility here is between people, not between stations or analyzers (run a study on
each station to compare them).  Per band, the figure judged (the worst VSWR) of every reading
goes into an analysis of variance of the balanced crossed design devices x operators with r
replicates -- the ANOVA method of a gauge repeatability and reproducibility study: the
two-factor random-effects model y = μ + P_i + O_j + (PO)_ij + ε_ijm, whose mean squares have
the expectations

    E[MS_E] = σ²_E,  E[MS_PO] = σ²_E + r σ²_PO,
    E[MS_O] = σ²_E + r σ²_PO + n r σ²_O,  E[MS_P] = σ²_E + r σ²_PO + k r σ²_P

(D. C. Montgomery, *Design and Analysis of Experiments*, chapter "Experiments with random
factors", its gauge capability example; AIAG, *Measurement Systems Analysis*, 4th ed. 2010,
"ANOVA method" -- both from memory).  Variance components are solved from them, a negative
estimate taken as zero.  With one operator the design is one-way (ISO 5725-2:2019's model for
a single level, repeatability only).

- repeatability (equipment variation) σ_E -- connector repeatability, noise;
- reproducibility (appraiser variation) sqrt(σ²_O + σ²_PO) -- operators and their interaction
  with the devices;
- gauge R&R sqrt(σ²_E + σ²_O + σ²_PO); part variation σ_P;
- each as a share of the tolerance, 6σ / T (the precision-to-tolerance ratio, Montgomery,
  *Introduction to Statistical Quality Control*, from memory).  The tolerance of a VSWR limit
  L is L - 1: the band's figure cannot read below 1.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from lineproof.toml_problems import TableReader

#: The method's text, as records carry it.
METHOD = ("ANOVA method, crossed random-effects model devices x operators with replicates "
          "(Montgomery, Design and Analysis of Experiments; AIAG MSA 4th ed.); shares = 6 sigma / tolerance")
#: Spread counted against the tolerance: ±3 sigma (the precision-to-tolerance ratio's 6 sigma).
SIGMA_SPAN = 6.0


@dataclass(frozen=True)
class AnovaTable:
    """Sums of squares, degrees of freedom and mean squares of the crossed design."""

    devices: int
    operators: int
    replicates: int
    ss_devices: float
    ss_operators: float
    ss_interaction: float
    ss_error: float

    @property
    def df_devices(self) -> int:
        return self.devices - 1

    @property
    def df_operators(self) -> int:
        return self.operators - 1

    @property
    def df_interaction(self) -> int:
        return (self.devices - 1) * (self.operators - 1)

    @property
    def df_error(self) -> int:
        return self.devices * self.operators * (self.replicates - 1)

    @staticmethod
    def _mean_square(ss: float, df: int) -> float:
        return ss / df if df > 0 else 0.0

    @property
    def ms_devices(self) -> float:
        return self._mean_square(self.ss_devices, self.df_devices)

    @property
    def ms_operators(self) -> float:
        return self._mean_square(self.ss_operators, self.df_operators)

    @property
    def ms_interaction(self) -> float:
        return self._mean_square(self.ss_interaction, self.df_interaction)

    @property
    def ms_error(self) -> float:
        return self._mean_square(self.ss_error, self.df_error)


def anova(readings: np.ndarray) -> AnovaTable:
    """The ANOVA table of readings shaped (devices, operators, replicates)."""
    y = np.asarray(readings, dtype=float)
    if y.ndim != 3 or min(y.shape) < 1 or y.shape[0] < 2 or y.shape[2] < 2:
        raise ValueError("a study needs at least 2 devices and 2 replicates, as (devices, operators, replicates)")
    n, k, r = y.shape
    grand = y.mean()
    cell = y.mean(axis=2)
    device = y.mean(axis=(1, 2))
    operator = y.mean(axis=(0, 2))
    ss_devices = k * r * float(np.sum((device - grand) ** 2))
    ss_operators = n * r * float(np.sum((operator - grand) ** 2))
    ss_interaction = r * float(np.sum((cell - device[:, None] - operator[None, :] + grand) ** 2))
    ss_error = float(np.sum((y - cell[:, :, None]) ** 2))
    return AnovaTable(n, k, r, ss_devices, ss_operators, ss_interaction, ss_error)


@dataclass(frozen=True)
class GaugeResult:
    """Standard deviations of a study and their shares of the tolerance (6σ / T)."""

    table: AnovaTable
    repeatability: float
    reproducibility: float
    operator_sd: float
    interaction_sd: float
    device_sd: float
    tolerance: float

    @property
    def gauge(self) -> float:
        return math.hypot(self.repeatability, self.reproducibility)

    def share(self, sigma: float) -> float:
        return SIGMA_SPAN * sigma / self.tolerance

    @property
    def total(self) -> float:
        return math.hypot(self.gauge, self.device_sd)


def variance_components(table: AnovaTable, tolerance: float) -> GaugeResult:
    """Solve the expected mean squares for the standard deviations (negative -> zero)."""
    n, k, r = table.devices, table.operators, table.replicates
    error = table.ms_error
    if k > 1:
        interaction = max(0.0, (table.ms_interaction - error) / r)
        operators = max(0.0, (table.ms_operators - table.ms_interaction) / (n * r))
        devices = max(0.0, (table.ms_devices - table.ms_interaction) / (k * r))
    else:
        interaction = operators = 0.0
        devices = max(0.0, (table.ms_devices - error) / r)
    return GaugeResult(table, math.sqrt(error), math.sqrt(operators + interaction), math.sqrt(operators),
                       math.sqrt(interaction), math.sqrt(devices), tolerance)


@dataclass(frozen=True)
class StudySpec:
    """A repeatability study in a sequence: reconnections per device, and the operators (none:
    the run's own operator only)."""

    reconnections: int
    operators: tuple[str, ...] = ()


def parse_study(table: TableReader | None) -> StudySpec | None:
    """The ``[study]`` table: ``kind = "repeatability"``, ``reconnections``, ``operators``."""
    if table is None:
        return None
    table.reject_unknown({"kind", "reconnections", "operators"})
    table.choice("kind", ("repeatability",), "repeatability")
    count = table.get("reconnections", int, fix="give how many times each device is connected and measured, e.g. 5")
    if count is not None and count < 2:
        table.problems.add(table.key("reconnections"), f"must be at least 2, got {count}",
                           "a repeatability needs at least two readings of each device, e.g. 5")
        count = None
    operators = table.get("operators", list, [])
    names = []
    for index, name in enumerate(operators or [], 1):
        if not isinstance(name, str) or not name.strip():
            table.problems.add(f"{table.key('operators')}[{index}]", "an operator's name must be text",
                               'list names, e.g. operators = ["A. Tester", "B. Tester"]')
        else:
            names.append(" ".join(name.split())[:80])
    if len({n.lower() for n in names}) != len(names):
        table.problems.add(table.key("operators"), "an operator is listed twice", "list each operator once")
    return None if count is None else StudySpec(count, tuple(names))
