"""Calibration kits: TOML definitions of standards and their ideal (model) reflection.

A standard is an offset line (impedance, delay, loss) ended in a terminal impedance: an
open's fringing capacitance C(f) = C0 + C1 f + C2 f² + C3 f³, a short's inductance
L(f) = L0 + L1 f + L2 f² + L3 f³, or a matched load.  The model and its formulas are those
of Keysight (Agilent) Application Note 1287-11, "Specifying Calibration Standards and Kits
for Keysight Vector Network Analyzers" (cited from memory); the tests check them against an
independent telegrapher's-equation model of the same physics.
"""

from __future__ import annotations

import hashlib
import math
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from lineproof.errors import InputError

STANDARD_KINDS = ("open", "short", "load")


@dataclass(frozen=True)
class StandardDefinition:
    name: str
    kind: str
    offset_delay_s: float = 0.0
    offset_loss_ohm_per_s: float = 0.0
    offset_impedance_ohm: float = 50.0
    coefficients: tuple[float, float, float, float] = (0.0, 0.0, 0.0, 0.0)


@dataclass(frozen=True)
class KitUncertainty:
    """The kit's own statement of how far its standards may be from their models."""

    load_return_loss_db: float = 40.0
    open_phase_deg: float = 1.0
    short_phase_deg: float = 1.0


@dataclass(frozen=True)
class CalKit:
    name: str
    connector: str
    reference_impedance_ohm: float
    standards: dict[str, StandardDefinition]
    uncertainty: KitUncertainty
    source: str
    sha256: str
    note: str = ""
    extra: dict[str, Any] = field(default_factory=dict)

    def standard(self, kind: str) -> StandardDefinition:
        for definition in self.standards.values():
            if definition.kind == kind:
                return definition
        raise InputError(f"the kit has no {kind} standard", path=self.source, key="standards",
                         fix=f"add a [standards.{kind}] table with kind = \"{kind}\"")

    def ideal(self, kind: str, frequencies_hz: np.ndarray) -> np.ndarray:
        """Model reflection of the kit's ``kind`` standard, relative to the kit's Z0."""
        return ideal_reflection(self.standard(kind), frequencies_hz, self.reference_impedance_ohm)


def ideal_reflection(standard: StandardDefinition, frequencies_hz: np.ndarray, z_reference: float) -> np.ndarray:
    """AN 1287-11 offset-standard model.

    With ω = 2πf, loss in Ω/s at 1 GHz, delay τ, offset impedance Z0:
      Zc = Z0 + (1 - j) loss/(2ω) sqrt(f/1 GHz)
      αl = loss τ / (2 Z0) sqrt(f/1 GHz),  βl = ωτ + αl,  γl = αl + jβl
      Γ1 = (Zc - Zr)/(Zc + Zr),  ΓT = (ZT - Zr)/(ZT + Zr)
      Γ  = [Γ1 (1 - e - Γ1 ΓT) + e ΓT] / [1 - Γ1 (e Γ1 + ΓT (1 - e))],  e = exp(-2γl)
    """
    f = np.asarray(frequencies_hz, dtype=float)
    w = 2 * np.pi * f
    c0, c1, c2, c3 = standard.coefficients
    poly = c0 + c1 * f + c2 * f**2 + c3 * f**3
    if standard.kind == "open":
        gamma_t = np.ones(f.shape, dtype=complex) if not np.any(poly) else _to_gamma(1 / (1j * w * poly), z_reference)
    elif standard.kind == "short":
        gamma_t = _to_gamma(1j * w * poly, z_reference)
    else:  # matched load
        gamma_t = np.zeros(f.shape, dtype=complex)
    tau, loss, z_offset = standard.offset_delay_s, standard.offset_loss_ohm_per_s, standard.offset_impedance_ohm
    if tau == 0 and loss == 0 and z_offset == z_reference:
        return gamma_t
    root_f = np.sqrt(f / 1e9)
    z_c = z_offset + (1 - 1j) * loss / (2 * w) * root_f
    alpha_l = loss * tau / (2 * z_offset) * root_f
    gamma_l = alpha_l + 1j * (w * tau + alpha_l)
    e = np.exp(-2 * gamma_l)
    g1 = (z_c - z_reference) / (z_c + z_reference)
    return (g1 * (1 - e - g1 * gamma_t) + e * gamma_t) / (1 - g1 * (e * g1 + gamma_t * (1 - e)))


def _to_gamma(z: np.ndarray, z_reference: float) -> np.ndarray:
    return (z - z_reference) / (z + z_reference)


def _number(table: dict[str, Any], key: str, source: str, where: str, default: float | None = None,
            minimum: float | None = None) -> float:
    if key not in table:
        if default is None:
            raise InputError("missing key", path=source, key=f"{where}.{key}", fix=f"add {key} = <number>")
        return default
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError(f"must be a number, got {value!r}", path=source, key=f"{where}.{key}")
    if minimum is not None and value < minimum:
        raise InputError(f"must be >= {minimum:g}, got {value!r}", path=source, key=f"{where}.{key}",
                         fix="a delay, loss or impedance cannot be negative")
    return float(value)


def _standard(name: str, table: Any, source: str, z0: float) -> StandardDefinition:
    where = f"standards.{name}"
    if not isinstance(table, dict):
        raise InputError("must be a table", path=source, key=where)
    allowed = {"kind", "offset_delay_s", "offset_loss_ohm_per_s", "offset_impedance_ohm", "capacitance", "inductance"}
    for key in table:
        if key not in allowed:
            raise InputError("unknown key", path=source, key=f"{where}.{key}", fix=f"use only: {', '.join(sorted(allowed))}")
    kind = table.get("kind")
    if kind not in STANDARD_KINDS:
        raise InputError(f"unknown standard kind {kind!r}", path=source, key=f"{where}.kind",
                         fix=f"use one of: {', '.join(STANDARD_KINDS)}")
    coefficient_key = {"open": "capacitance", "short": "inductance"}.get(kind)
    coefficients = (0.0, 0.0, 0.0, 0.0)
    if coefficient_key and coefficient_key in table:
        raw = table[coefficient_key]
        if not (isinstance(raw, list) and 1 <= len(raw) <= 4 and all(
                isinstance(v, (int, float)) and not isinstance(v, bool) for v in raw)):
            raise InputError("must be a list of up to four numbers [c0, c1, c2, c3]", path=source,
                             key=f"{where}.{coefficient_key}")
        coefficients = tuple(float(v) for v in raw) + (0.0,) * (4 - len(raw))
    return StandardDefinition(
        name=name,
        kind=kind,
        offset_delay_s=_number(table, "offset_delay_s", source, where, 0.0, minimum=0.0),
        offset_loss_ohm_per_s=_number(table, "offset_loss_ohm_per_s", source, where, 0.0, minimum=0.0),
        offset_impedance_ohm=_number(table, "offset_impedance_ohm", source, where, z0, minimum=1e-3),
        coefficients=coefficients,  # type: ignore[arg-type]
    )


def parse_kit(text: str, source: str) -> CalKit:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc})", path=source, fix="correct the TOML syntax") from exc
    head = data.get("kit")
    if not isinstance(head, dict):
        raise InputError("missing [kit] table", path=source, key="kit", fix="add [kit] with name and reference_impedance_ohm")
    if not isinstance(head.get("name"), str) or not head["name"].strip():
        raise InputError("missing kit name", path=source, key="kit.name", fix='add name = "..."')
    z0 = _number(head, "reference_impedance_ohm", source, "kit", 50.0, minimum=1e-3)
    standards_table = data.get("standards")
    if not isinstance(standards_table, dict) or not standards_table:
        raise InputError("missing [standards.*] tables", path=source, key="standards",
                         fix="define at least an open, a short and a load")
    standards = {name: _standard(name, table, source, z0) for name, table in standards_table.items()}
    unc = data.get("uncertainty", {})
    uncertainty = KitUncertainty(
        load_return_loss_db=_number(unc, "load_return_loss_db", source, "uncertainty", 40.0, minimum=0.0),
        open_phase_deg=_number(unc, "open_phase_deg", source, "uncertainty", 1.0, minimum=0.0),
        short_phase_deg=_number(unc, "short_phase_deg", source, "uncertainty", 1.0, minimum=0.0),
    )
    return CalKit(
        name=head["name"].strip(),
        connector=str(head.get("connector", "")),
        reference_impedance_ohm=z0,
        standards=standards,
        uncertainty=uncertainty,
        source=source,
        sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
        note=str(head.get("note", "")),
    )


def load_kit(path_or_name: str | Path, relative_to: Path | None = None) -> CalKit:
    """Load a kit file: a path (relative to ``relative_to`` when given), or a kit shipped
    with lineproof (``kits/n50-illustrative.toml``)."""
    path = Path(path_or_name)
    candidates = [relative_to / path] if relative_to is not None and not path.is_absolute() else []
    candidates.append(path)
    for candidate in candidates:
        if candidate.is_file():
            return parse_kit(candidate.read_text(encoding="utf-8"), str(candidate))
    shipped = resources.files("lineproof.sequences") / str(path_or_name)
    if shipped.is_file():
        return parse_kit(shipped.read_text(encoding="utf-8"), f"sequences/{path_or_name}")
    raise InputError("cal kit file not found", path=str(path_or_name), key="kit",
                     fix="give a path to a kit .toml file or a shipped kit such as kits/n50-illustrative.toml")
