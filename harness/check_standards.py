"""Check-standard definitions in a sequence file: what the standard should read and how sure
that is, how a check is judged, and how its history is charted.

```toml
[check_standard]
name = "mismatch-2to1"              # the bench object / switch wiring name
reference_vswr = 2.0                # or reference_file = "cert.s1p", or [check_standard.model]
reference_uncertainty = 0.004       # expanded (k = 2) U of the reference |Γ|; or [[f_hz, U], ...]
repeats = 3                         # reconnections per check (spread for the precision chart)
baseline_checks = 10                # the first check of each of the first K calibrations sets the limits

[check_standard.model]              # a resistance, a series inductance, a shunt capacitance
resistance_ohm = 100.0
series_inductance_h = 0.1e-9
```

With ``reference_uncertainty`` a check is judged by En per band (see
:mod:`lineproof.verification`); without it, by ``tolerance``, the largest accepted deviation
of |Γ| (one of the two, not both).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lineproof.toml_problems import TableReader

#: Default number of checks whose values set a new control chart's limits.  The e-Handbook
#: asks for enough values for a reliable standard deviation; with K = 10 the t factor is
#: 4.09 at α = 0.0027 (common practice, no published source for the number itself).
DEFAULT_BASELINE_CHECKS = 10


@dataclass(frozen=True)
class ReferenceModel:
    """A check standard as a circuit: a resistance with a series inductance, shunted by a
    capacitance at its connector plane."""

    resistance_ohm: float
    series_inductance_h: float = 0.0
    shunt_capacitance_f: float = 0.0

    def reflection(self, frequencies_hz: np.ndarray, reference_impedance_ohm: float = 50.0) -> np.ndarray:
        w = 2 * np.pi * np.asarray(frequencies_hz, dtype=float)
        series = self.resistance_ohm + 1j * w * self.series_inductance_h
        admittance = 1.0 / series + 1j * w * self.shunt_capacitance_f
        impedance = 1.0 / admittance
        return (impedance - reference_impedance_ohm) / (impedance + reference_impedance_ohm)


@dataclass(frozen=True)
class CheckStandardSpec:
    """A check standard, what it should read (a Touchstone reference, a circuit model or a
    nominal VSWR), how sure the reference is, and how checks with it are judged and charted."""

    name: str
    tolerance: float | None = None
    reference_file: str | None = None
    reference_vswr: float | None = None
    model: ReferenceModel | None = None
    #: Expanded (k = 2) uncertainty of the reference |Γ|: one figure or (frequency, U) pairs.
    reference_uncertainty: float | tuple[tuple[float, float], ...] | None = None
    repeats: int = 1
    baseline_checks: int = DEFAULT_BASELINE_CHECKS

    @property
    def criterion(self) -> str:
        return "En" if self.reference_uncertainty is not None else "tolerance"


_KEYS = {"name", "reference_file", "reference_vswr", "model", "reference_uncertainty", "tolerance", "repeats",
         "baseline_checks"}


def _model(table: TableReader | None) -> ReferenceModel | None:
    if table is None:
        return None
    table.reject_unknown({"resistance_ohm", "series_inductance_h", "shunt_capacitance_f"})
    resistance = table.number("resistance_ohm", above=0.0, fix="give the standard's resistance, e.g. 100.0")
    inductance = table.number("series_inductance_h", 0.0, minimum=0.0)
    capacitance = table.number("shunt_capacitance_f", 0.0, minimum=0.0)
    if None in (resistance, inductance, capacitance):
        return None
    return ReferenceModel(resistance, inductance, capacitance)  # type: ignore[arg-type]


def _uncertainty(table: TableReader) -> float | tuple[tuple[float, float], ...] | None:
    value = table.get("reference_uncertainty", (float, list), None,
                      fix="give the expanded (k = 2) uncertainty of |reflection|, e.g. 0.004, "
                      "or [[frequency_hz, U], ...]")
    if value is None or isinstance(value, float):
        if isinstance(value, float) and not 0.0 <= value < 1.0:
            table.problems.add(table.key("reference_uncertainty"), f"must be from 0 to 1 (|reflection|), got {value}",
                               "give the expanded uncertainty of |reflection|, e.g. 0.004")
            return None
        return value
    pairs = []
    for entry in value:
        if (not isinstance(entry, list) or len(entry) != 2 or not all(isinstance(v, int | float) for v in entry)
                or not entry[0] > 0 or not 0 <= entry[1] < 1):
            table.problems.add(table.key("reference_uncertainty"), f"entry {entry!r} is not [frequency_hz, U]",
                               "write each entry as [frequency in Hz, expanded uncertainty of |reflection|]")
            return None
        pairs.append((float(entry[0]), float(entry[1])))
    if not pairs:
        table.problems.add(table.key("reference_uncertainty"), "no entries", "give at least one [frequency_hz, U]")
        return None
    return tuple(pairs)


def _whole_number(table: TableReader, key: str, default: int, minimum: int, fix: str) -> int:
    value = table.get(key, int, default)
    if value is None:
        return default
    if value < minimum:
        table.problems.add(table.key(key), f"must be at least {minimum}, got {value}", fix)
        return default
    return int(value)


def parse_check_standard(table: TableReader | None, object_name) -> CheckStandardSpec | None:  # noqa: ANN001
    """The ``[check_standard]`` table (``object_name`` reads and checks the name)."""
    if table is None:
        return None
    table.reject_unknown(_KEYS)
    name = object_name(table, "name")
    reference_file = table.get("reference_file", str, None)
    reference_vswr = table.number("reference_vswr", None, minimum=1.0)
    model = _model(table.table("model"))
    uncertainty = _uncertainty(table)
    tolerance = table.number("tolerance", None, above=0.0, fix="give the largest accepted deviation of |Γ|, e.g. 0.01")
    repeats = _whole_number(table, "repeats", 1, 1, "give how many times each check measures the standard, e.g. 3")
    baseline = _whole_number(table, "baseline_checks", DEFAULT_BASELINE_CHECKS, 2,
                             "give how many checks set the control limits, e.g. 10")
    given = [k for k, v in (("reference_file", reference_file), ("reference_vswr", reference_vswr),
                            ("model", table.data.get("model"))) if v is not None]
    if len(given) != 1:
        table.problems.add(table.key("reference_file"), "say what the check standard should read, in one way",
                           'give reference_file = "<touchstone .s1p>", reference_vswr = <ratio> or a '
                           "[check_standard.model] table -- exactly one")
        return None
    if uncertainty is None and tolerance is None and not {"reference_uncertainty", "tolerance"} & set(table.data):
        table.problems.add(table.key("tolerance"), "say how a check is judged",
                           "give reference_uncertainty (judged by En) or tolerance (largest deviation of |Γ|)")
        return None
    if uncertainty is not None and tolerance is not None:
        table.problems.add(table.key("tolerance"), "a check is judged by En or by a tolerance, not both",
                           "remove tolerance (En uses the reference's uncertainty and lineproof's own)")
        return None
    if name is None or (uncertainty is None and tolerance is None) or (given == ["model"] and model is None):
        return None
    return CheckStandardSpec(name, tolerance, reference_file, reference_vswr, model, uncertainty, repeats, baseline)
