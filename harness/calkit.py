"""Calibration kits: TOML definitions of standards, their ideal (model) responses, and the
kit's own statement of how far the actual standards may be from those models.

A reflect standard is an offset line (impedance, delay, loss) ended in a terminal
impedance: an open's fringing capacitance C(f) = C0 + C1 f + C2 f² + C3 f³, a short's
inductance L(f) = L0 + L1 f + L2 f² + L3 f³, or a load (ideal match, or modelled as a
resistance with series inductance and shunt capacitance).  A thru is an offset line
between the ports (zero delay: a flush thru).  Any standard may instead be given as data in
a Touchstone file (``touchstone = "file.s1p"``, ``.s2p`` for a thru).  The model and its
formulas are those of Keysight (Agilent) Application Note 1287-11, "Specifying Calibration
Standards and Kits for Keysight Vector Network Analyzers" (cited from memory); the tests
check them against an independent telegrapher's-equation model of the same physics.

The ``[uncertainty]`` table states the actual standards' spread (see :class:`KitUncertainty`);
:mod:`lineproof.uncertainty` turns it into the calibration's residual errors.
"""

from __future__ import annotations

import hashlib
import math
import tomllib
from dataclasses import dataclass, field, fields, replace
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from lineproof.errors import InputError
from lineproof.resample import resample
from lineproof.toml_problems import KeyLines

STANDARD_KINDS = ("open", "short", "load", "thru")
REFLECT_KINDS = ("open", "short", "load")
#: Largest error (|Γ| or |S|) that moving a data standard onto a sweep grid may add.
DATA_INTERPOLATION_TOLERANCE = 1e-4


@dataclass(frozen=True, eq=False)
class StandardData:
    """A standard's response from a Touchstone file: (N,) for a reflect, (N, 2, 2) for a thru."""

    path: str
    frequencies_hz: np.ndarray
    s: np.ndarray


@dataclass(frozen=True)
class StandardDefinition:
    name: str
    kind: str
    offset_delay_s: float = 0.0
    offset_loss_ohm_per_s: float = 0.0
    offset_impedance_ohm: float = 50.0
    coefficients: tuple[float, float, float, float] = (0.0, 0.0, 0.0, 0.0)
    #: A modelled load: resistance with series inductance and shunt capacitance (None: ideal).
    load_resistance_ohm: float | None = None
    load_inductance_h: float = 0.0
    load_capacitance_f: float = 0.0
    data: StandardData | None = field(default=None, compare=False)


@dataclass(frozen=True)
class KitUncertainty:
    """The kit's statement of how far its actual standards may be from their definitions.

    Keys ending ``_db`` and ``_deg`` are worst-case limits; keys with ``uncertainty`` are
    standard uncertainties (one standard deviation, normal distribution).

    - ``load_return_loss_db``: the worst return loss of the actual load (its reflection, of
      unknown phase, is at most 10^(-RL/20)); with ``load_return_loss_best_db`` the loads'
      return loss is taken as spread evenly (in dB) between the two figures.
    - ``open_phase_deg`` / ``short_phase_deg``: worst-case phase deviation (rectangular).
    - ``*_delay_uncertainty_s``: offset delay; ``open_capacitance_uncertainty`` relative
      fringing capacitance; ``short_inductance_uncertainty_h`` the short's inductance.
    - ``thru_delay_uncertainty_s``, ``thru_loss_uncertainty`` (relative |S21|): the thru.
    """

    load_return_loss_db: float = 40.0
    load_return_loss_best_db: float | None = None
    open_phase_deg: float = 1.0
    short_phase_deg: float = 1.0
    open_delay_uncertainty_s: float = 0.0
    short_delay_uncertainty_s: float = 0.0
    open_capacitance_uncertainty: float = 0.0
    short_inductance_uncertainty_h: float = 0.0
    thru_delay_uncertainty_s: float = 0.0
    thru_loss_uncertainty: float = 0.0


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
    #: Where each key of the kit file is set (for messages); None for a kit made in code.
    key_lines: KeyLines | None = field(default=None, compare=False, repr=False)

    def line_of(self, key: str) -> int | None:
        """The line of the kit file that sets ``key`` (or its nearest parent), if known."""
        return self.key_lines.line_of(key) if self.key_lines is not None else None

    def standard(self, kind: str) -> StandardDefinition:
        """The kit's one standard of ``kind`` (a kit file holds at most one of each kind)."""
        for definition in self.standards.values():
            if definition.kind == kind:
                return definition
        first = next(iter(self.standards), None)  # [standards.x] headers set no line for "standards" itself
        raise InputError(f"the kit has no {kind} standard", path=self.source, key="standards",
                         line=self.line_of(f"standards.{first}") if first else None,
                         fix=f"add a [standards.{kind}] table with kind = \"{kind}\"")

    def has(self, kind: str) -> bool:
        return any(definition.kind == kind for definition in self.standards.values())

    def ideal(self, kind: str, frequencies_hz: np.ndarray) -> np.ndarray:
        """Model reflection of the kit's ``kind`` standard, relative to the kit's Z0."""
        definition = self.standard(kind)
        if definition.data is not None:
            return _data_on_grid(definition, frequencies_hz, self)
        return ideal_reflection(definition, frequencies_hz, self.reference_impedance_ohm)

    def thru(self, frequencies_hz: np.ndarray) -> np.ndarray:
        """S-parameters (N, 2, 2) of the kit's thru, relative to the kit's Z0."""
        definition = self.standard("thru")
        if definition.data is not None:
            return _data_on_grid(definition, frequencies_hz, self)
        return thru_s(definition, frequencies_hz, self.reference_impedance_ohm)


def _offset_line(standard: StandardDefinition, f: np.ndarray, z_reference: float) -> tuple[np.ndarray, np.ndarray]:
    """AN 1287-11 lossy offset: the line's Γ1 against Zr and e^(-γl)."""
    w = 2 * np.pi * f
    tau, loss, z_offset = standard.offset_delay_s, standard.offset_loss_ohm_per_s, standard.offset_impedance_ohm
    root_f = np.sqrt(f / 1e9)
    with np.errstate(divide="ignore", invalid="ignore"):
        z_c = z_offset + (1 - 1j) * loss / (2 * w) * root_f
    z_c = np.where(w > 0, z_c, z_offset)
    alpha_l = loss * tau / (2 * z_offset) * root_f
    gamma_l = alpha_l + 1j * (w * tau + alpha_l)
    return (z_c - z_reference) / (z_c + z_reference), np.exp(-gamma_l)


def _terminal_reflection(standard: StandardDefinition, f: np.ndarray, z_reference: float) -> np.ndarray:
    w = 2 * np.pi * f
    c0, c1, c2, c3 = standard.coefficients
    poly = c0 + c1 * f + c2 * f**2 + c3 * f**3
    if standard.kind == "open":
        if not np.any(poly):
            return np.ones(f.shape, dtype=complex)
        return _to_gamma(1 / (1j * w * poly), z_reference)
    if standard.kind == "short":
        return _to_gamma(1j * w * poly, z_reference)
    if standard.load_resistance_ohm is None:
        return np.zeros(f.shape, dtype=complex)
    z = standard.load_resistance_ohm + 1j * w * standard.load_inductance_h
    if standard.load_capacitance_f:
        z = 1 / (1 / z + 1j * w * standard.load_capacitance_f)
    return _to_gamma(z, z_reference)


def ideal_reflection(standard: StandardDefinition, frequencies_hz: np.ndarray, z_reference: float) -> np.ndarray:
    """AN 1287-11 offset-standard model.

    With ω = 2πf, loss in Ω/s at 1 GHz, delay τ, offset impedance Z0:
      Zc = Z0 + (1 - j) loss/(2ω) sqrt(f/1 GHz)
      αl = loss τ / (2 Z0) sqrt(f/1 GHz),  βl = ωτ + αl,  γl = αl + jβl
      Γ1 = (Zc - Zr)/(Zc + Zr),  ΓT = (ZT - Zr)/(ZT + Zr)
      Γ  = [Γ1 (1 - e - Γ1 ΓT) + e ΓT] / [1 - Γ1 (e Γ1 + ΓT (1 - e))],  e = exp(-2γl)
    """
    f = np.asarray(frequencies_hz, dtype=float)
    gamma_t = _terminal_reflection(standard, f, z_reference)
    if standard.offset_delay_s == 0 and standard.offset_loss_ohm_per_s == 0 \
            and standard.offset_impedance_ohm == z_reference:
        return gamma_t
    g1, p = _offset_line(standard, f, z_reference)
    e = p * p
    return (g1 * (1 - e - g1 * gamma_t) + e * gamma_t) / (1 - g1 * (e * g1 + gamma_t * (1 - e)))


def thru_s(standard: StandardDefinition, frequencies_hz: np.ndarray, z_reference: float) -> np.ndarray:
    """S-parameters of an offset line between two ports (AN 1287-11 line, both ends in Zr):
    S11 = S22 = Γ1 (1 - e) / (1 - Γ1² e),  S21 = S12 = P (1 - Γ1²) / (1 - Γ1² e),
    P = e^(-γl), e = P²."""
    f = np.asarray(frequencies_hz, dtype=float)
    g1, p = _offset_line(standard, f, z_reference)
    e = p * p
    denominator = 1 - g1 * g1 * e
    s = np.empty(f.shape + (2, 2), dtype=complex)
    s[:, 0, 0] = s[:, 1, 1] = g1 * (1 - e) / denominator
    s[:, 0, 1] = s[:, 1, 0] = p * (1 - g1 * g1) / denominator
    return s


def varied(standard: StandardDefinition, **changes: float | tuple[float, ...]) -> StandardDefinition:
    """The same standard with some model values changed (for sensitivity analysis)."""
    return replace(standard, **changes)


def _to_gamma(z: np.ndarray, z_reference: float) -> np.ndarray:
    return (z - z_reference) / (z + z_reference)


def _data_on_grid(standard: StandardDefinition, frequencies_hz: np.ndarray, kit: CalKit) -> np.ndarray:
    data = standard.data
    assert data is not None
    f = np.asarray(frequencies_hz, dtype=float)
    if data.frequencies_hz.shape == f.shape and np.allclose(data.frequencies_hz, f, rtol=1e-9, atol=0):
        return data.s.copy()
    values = np.moveaxis(data.s, 0, -1)
    key = f"standards.{standard.name}.touchstone"
    source, line = kit.source, kit.line_of(key)
    try:
        moved = resample(data.frequencies_hz, values, f)
    except ValueError as exc:
        raise InputError(f"the data in {data.path} cannot serve this sweep ({exc})", path=source, key=key, line=line,
                         fix="give data that cover the sweep on at least 13 points") from exc
    worst = float(np.max(moved.estimated_error))
    if worst > DATA_INTERPOLATION_TOLERANCE:
        raise InputError(
            f"interpolating {data.path} onto the sweep would add an error of about {worst:.2g} "
            f"(tolerance {DATA_INTERPOLATION_TOLERANCE:g})", path=source, key=key, line=line,
            fix="give the standard's data on a finer frequency grid")
    return np.moveaxis(moved.values, -1, 0)


# -- reading kit files ---------------------------------------------------------------------

_MODEL_KEYS = {"offset_delay_s", "offset_loss_ohm_per_s", "offset_impedance_ohm", "capacitance", "inductance",
               "load_resistance_ohm", "load_inductance_h", "load_capacitance_f"}
_ALLOWED_KEYS = _MODEL_KEYS | {"kind", "touchstone"}


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
                         fix="a delay, loss, impedance or uncertainty cannot be negative")
    return float(value)


def _coefficients(table: dict[str, Any], key: str, source: str, where: str) -> tuple[float, float, float, float]:
    if key not in table:
        return (0.0, 0.0, 0.0, 0.0)
    raw = table[key]
    if not (isinstance(raw, list) and 1 <= len(raw) <= 4 and all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in raw)):
        raise InputError("must be a list of up to four numbers [c0, c1, c2, c3]", path=source, key=f"{where}.{key}")
    padded = [float(v) for v in raw] + [0.0] * (4 - len(raw))
    return (padded[0], padded[1], padded[2], padded[3])


def _read_data(path_text: Any, kind: str, source: str, where: str, folder: Path | None, z0: float) -> StandardData:
    import skrf

    key = f"{where}.touchstone"
    if not isinstance(path_text, str) or not path_text:
        raise InputError("must be a file name", path=source, key=key)
    path = Path(path_text)
    if folder is not None and not path.is_absolute():
        path = folder / path
    ports = 2 if kind == "thru" else 1
    try:
        network = skrf.Network(str(path))
    except Exception as exc:  # scikit-rf raises many kinds for a bad or missing file
        raise InputError(f"cannot read Touchstone file {path} ({exc})", path=source, key=key,
                         fix="give the path of a readable .s1p (reflect) or .s2p (thru), relative to the kit file") from exc
    if network.nports != ports:
        raise InputError(f"{path} has {network.nports} ports, a {kind} needs {ports}", path=source, key=key)
    if not np.allclose(network.z0, z0):
        network.renormalize(np.full(network.z0.shape, z0, dtype=complex))
    s = network.s[:, 0, 0] if ports == 1 else network.s
    return StandardData(str(path), np.array(network.f, dtype=float), np.array(s, dtype=complex))


def _standard(name: str, table: Any, source: str, z0: float, folder: Path | None) -> StandardDefinition:
    where = f"standards.{name}"
    if not isinstance(table, dict):
        raise InputError("must be a table", path=source, key=where)
    for key in table:
        if key not in _ALLOWED_KEYS:
            raise InputError("unknown key", path=source, key=f"{where}.{key}", fix=f"use only: {', '.join(sorted(_ALLOWED_KEYS))}")
    kind = table.get("kind")
    if kind not in STANDARD_KINDS:
        raise InputError(f"unknown standard kind {kind!r}", path=source, key=f"{where}.kind",
                         fix=f"use one of: {', '.join(STANDARD_KINDS)}")
    if "touchstone" in table:
        model_keys = sorted(set(table) & _MODEL_KEYS)
        if model_keys:
            raise InputError("a standard is either a model or Touchstone data, not both", path=source,
                             key=f"{where}.{model_keys[0]}", fix="remove the model keys or the touchstone key")
        return StandardDefinition(name, kind, offset_impedance_ohm=z0,
                                  data=_read_data(table["touchstone"], kind, source, where, folder, z0))
    load_keys = sorted(k for k in table if k.startswith("load_"))
    if load_keys and kind != "load":
        raise InputError(f"only a load takes {load_keys[0]}", path=source, key=f"{where}.{load_keys[0]}")
    resistance = _number(table, "load_resistance_ohm", source, where, -1.0, minimum=1e-3) \
        if "load_resistance_ohm" in table else None
    return StandardDefinition(
        name=name,
        kind=kind,
        offset_delay_s=_number(table, "offset_delay_s", source, where, 0.0, minimum=0.0),
        offset_loss_ohm_per_s=_number(table, "offset_loss_ohm_per_s", source, where, 0.0, minimum=0.0),
        offset_impedance_ohm=_number(table, "offset_impedance_ohm", source, where, z0, minimum=1e-3),
        coefficients=_coefficients(table, {"open": "capacitance", "short": "inductance"}.get(kind, ""), source, where),
        load_resistance_ohm=resistance,
        load_inductance_h=_number(table, "load_inductance_h", source, where, 0.0, minimum=0.0),
        load_capacitance_f=_number(table, "load_capacitance_f", source, where, 0.0, minimum=0.0),
    )


def _uncertainty(table: Any, source: str) -> KitUncertainty:
    if not isinstance(table, dict):
        raise InputError("must be a table", path=source, key="uncertainty")
    names = {f.name for f in fields(KitUncertainty)}
    for key in table:
        if key not in names:
            raise InputError("unknown key", path=source, key=f"uncertainty.{key}", fix=f"use only: {', '.join(sorted(names))}")
    defaults = KitUncertainty()
    values = {key: _number(table, key, source, "uncertainty", getattr(defaults, key), minimum=0.0)
              for key in names if key in table}
    statement = KitUncertainty(**values)
    best = statement.load_return_loss_best_db
    if best is not None and best < statement.load_return_loss_db:
        raise InputError(f"the best load return loss ({best:g} dB) is below the worst ({statement.load_return_loss_db:g} dB)",
                         path=source, key="uncertainty.load_return_loss_best_db",
                         fix="load_return_loss_db is the worst (smallest) figure, load_return_loss_best_db the best")
    return statement


def parse_kit(text: str, source: str, folder: Path | None = None) -> CalKit:
    """A kit from TOML text; ``folder`` is where Touchstone data files are looked up.  Every
    problem is an :class:`InputError` naming the file, the key and its line, and the fix."""
    lines = KeyLines(text)
    try:
        return _parse_kit(text, source, folder, lines)
    except InputError as exc:
        if exc.line is not None or exc.path != source or not exc.key:
            raise
        raise InputError(exc.problem, path=exc.path, key=exc.key, line=lines.line_of(exc.key),
                         fix=exc.fix) from exc.__cause__


def _one_of_each_kind(standards: dict[str, StandardDefinition], source: str) -> None:
    """Refuse two standards of one kind: a calibration asks for "the open", and taking the
    first of two silently would calibrate with whichever the file happens to list first."""
    first: dict[str, str] = {}
    for name, definition in standards.items():
        earlier = first.setdefault(definition.kind, name)
        if earlier != name:
            kind = definition.kind
            raise InputError(
                f"a second {kind} standard: [standards.{earlier}] and [standards.{name}] are both kind = "
                f"\"{kind}\", and a calibration uses one standard of each kind", path=source,
                key=f"standards.{name}.kind",
                fix=f"keep one {kind} in this kit (remove [standards.{name}] or [standards.{earlier}]) and give the "
                    "other a kit file of its own")


def _parse_kit(text: str, source: str, folder: Path | None, lines: KeyLines) -> CalKit:
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
    standards = {name: _standard(name, table, source, z0, folder) for name, table in standards_table.items()}
    _one_of_each_kind(standards, source)
    return CalKit(
        name=head["name"].strip(),
        connector=str(head.get("connector", "")),
        reference_impedance_ohm=z0,
        standards=standards,
        uncertainty=_uncertainty(data.get("uncertainty", {}), source),
        source=source,
        sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
        note=str(head.get("note", "")),
        key_lines=lines,
    )


def load_kit(path_or_name: str | Path, relative_to: Path | None = None) -> CalKit:
    """Load a kit file: a path (relative to ``relative_to`` when given), or a kit shipped
    with lineproof (``kits/n50-illustrative.toml``)."""
    path = Path(path_or_name)
    candidates = [relative_to / path] if relative_to is not None and not path.is_absolute() else []
    candidates.append(path)
    for candidate in candidates:
        if candidate.is_file():
            return parse_kit(candidate.read_text(encoding="utf-8"), str(candidate), candidate.parent)
    shipped = resources.files("lineproof.sequences") / str(path_or_name)
    if shipped.is_file():
        with resources.as_file(shipped) as real_path:
            return parse_kit(real_path.read_text(encoding="utf-8"), f"sequences/{path_or_name}", real_path.parent)
    raise InputError("cal kit file not found", path=str(path_or_name), key="kit",
                     fix="give a path to a kit .toml file or a shipped kit such as kits/n50-illustrative.toml")
