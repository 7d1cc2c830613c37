"""Reading profile files: TOML text, ``based_on`` inheritance from shipped profiles, and a
typed table reader that collects every problem of a file, each naming the file, the line,
the key and the fix.

The schema itself (which keys mean what) lives in :mod:`.profiles`.
"""

from __future__ import annotations

import math
import re
import tomllib
from collections.abc import Mapping
from importlib import resources
from pathlib import Path
from typing import Any

from lineproof.drivers.toml_lines import KeyLines
from lineproof.errors import InputError


class ProfileProblems(InputError):
    """A profile file has several problems; ``problems`` lists each (file, line, key, fix)."""

    def __init__(self, problems: list[InputError], source: str) -> None:
        super().__init__(f"{len(problems)} problems found:\n" + "\n".join(f"  {p}" for p in problems), path=source)
        self.problems = problems

    def __str__(self) -> str:
        return self.message


class ProfileProblemList:
    """Every problem found in one profile file, each with the line that sets its key."""

    def __init__(self, source: str, text: str | None = None) -> None:
        self.source = source
        self.lines = KeyLines(text) if text is not None else None
        self.items: list[InputError] = []

    def add(self, key: str | None, problem: str, fix: str | None = None) -> None:
        line = self.lines.line_of(key) if self.lines is not None else None
        self.items.append(InputError(problem, path=self.source, key=key, line=line, fix=fix))

    def raise_if_any(self) -> None:
        """One problem is raised as itself; several as :class:`ProfileProblems`."""
        if len(self.items) == 1:
            raise self.items[0]
        if self.items:
            raise ProfileProblems(self.items, self.source)


class TableReader:
    """Typed access to a parsed TOML table.  Every problem is recorded in ``problems`` (with the
    file, key and line) and the value read as None, so that a file's problems are found at once."""

    def __init__(self, data: Mapping[str, Any], path: str, prefix: str = "",
                 problems: ProfileProblemList | None = None) -> None:
        self.data = data
        self.path = path
        self.prefix = prefix
        self.problems = problems if problems is not None else ProfileProblemList(path)

    def key(self, name: str) -> str:
        return f"{self.prefix}{name}"

    def problem(self, name: str, problem: str, fix: str | None = None) -> None:
        """Record a problem of key ``name`` of this table."""
        self.problems.add(self.key(name), problem, fix)

    def table(self, name: str, required: bool = True) -> TableReader | None:
        """The table ``name``; an empty one if it is absent and not required; None (and a
        recorded problem) if it is missing or not a table."""
        value = self.data.get(name)
        if value is None and not required:
            return TableReader({}, self.path, f"{self.key(name)}.", self.problems)
        if not isinstance(value, dict):
            self.problem(name, "missing table" if value is None else "must be a table",
                         fix=f"add a [{self.key(name)}] table")
            return None
        return TableReader(value, self.path, f"{self.key(name)}.", self.problems)

    def get(self, name: str, kind: type | tuple[type, ...], default: Any = ..., fix: str = "") -> Any:
        if name not in self.data:
            if default is ...:
                self.problem(name, "missing key", fix=fix or f"add {name} = ...")
                return None
            return default
        value = self.data[name]
        kinds = kind if isinstance(kind, tuple) else (kind,)
        if float in kinds and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)
        if not isinstance(value, kinds) or (isinstance(value, bool) and bool not in kinds):
            expected = " or ".join(k.__name__ for k in kinds)
            self.problem(name, f"must be {expected}, got {type(value).__name__} {value!r}",
                         fix=fix or f"give {name} as {expected}")
            return None
        return value

    def choice(self, name: str, allowed: tuple[str, ...], default: Any = ..., fix: str = "") -> str | None:
        value = self.get(name, str, default)
        if value is not None and value not in allowed:
            self.problem(name, f"unknown value {value!r}", fix=fix or f"use one of: {', '.join(allowed)}")
            return None
        return value

    def positive(self, name: str, default: Any = ..., fix: str = "") -> float | None:
        """A finite number greater than 0 (a time, a rate, a margin)."""
        value = self.get(name, float, default)
        if value is not None and not 0 < value < math.inf:
            self.problem(name, f"must be a finite number greater than 0, got {value!r}",
                         fix=fix or f"give {name} as a positive number, e.g. {name} = 1.5")
            return None
        return value

    def non_negative(self, name: str, default: Any = ..., fix: str = "") -> float | None:
        """A finite number of at least 0 (an allowance that may be nothing)."""
        value = self.get(name, float, default)
        if value is not None and not 0 <= value < math.inf:
            self.problem(name, f"must be a finite number of at least 0, got {value!r}",
                         fix=fix or f"give {name} as 0 or a positive number")
            return None
        return value

    def whole(self, name: str, low: int, high: int | None, default: Any = ..., fix: str = "") -> int | None:
        """A whole number from ``low`` to ``high`` (None: no upper limit)."""
        value = self.get(name, int, default, fix=fix)
        if value is not None and (value < low or (high is not None and value > high)):
            limits = f"{low}..{high}" if high is not None else f"at least {low}"
            self.problem(name, f"must be {limits}, got {value}", fix=fix or f"give {name} as a whole number {limits}")
            return None
        return value

    def reject_unknown(self, allowed: set[str] | frozenset[str]) -> None:
        for name in self.data:
            if name not in allowed:
                self.problem(name, "unknown key", fix=f"remove it or use one of: {', '.join(sorted(allowed))}")


def load_toml(text: str, source: str) -> dict[str, Any]:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc})", path=source, fix="correct the TOML syntax") from exc


def with_base(data: dict[str, Any], source: str, depth: int = 0) -> dict[str, Any]:
    """Merge a profile over the shipped profile it names in ``profile.based_on``: each
    table of the base is updated key by key, so a variant states only what differs."""
    head = data.get("profile")
    base_name = head.get("based_on") if isinstance(head, dict) else None
    if base_name is None:
        return data
    if not isinstance(base_name, str) or depth > 4:
        raise InputError("based_on must name one shipped profile (and not form a loop)",
                         path=source, key="profile.based_on",
                         fix=f"use one of {', '.join(shipped_profile_names())}, or remove based_on")
    try:
        base_text, base_source = shipped_text(base_name)
    except InputError as exc:
        raise InputError(exc.problem, path=source, key="profile.based_on", fix=exc.fix) from exc
    merged = with_base(load_toml(base_text, base_source), base_source, depth + 1)
    for table, values in data.items():
        if isinstance(values, dict) and isinstance(merged.get(table), dict):
            merged[table] = {**merged[table], **values}
        else:
            merged[table] = values
    merged["profile"].pop("based_on", None)
    return merged


def shipped_profile_names() -> list[str]:
    folder = resources.files("lineproof.drivers") / "profiles"
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))


def shipped_text(name: str) -> tuple[str, str]:
    """Text and display name of a shipped profile."""
    shipped = resources.files("lineproof.drivers") / "profiles" / f"{name}.toml"
    if not re.fullmatch(r"[a-z0-9][a-z0-9-]*", name) or not shipped.is_file():
        raise InputError(f"no shipped profile named {name!r}", key="profile",
                         fix=f"use one of {', '.join(shipped_profile_names())}, or a path to a .toml file")
    return shipped.read_text(encoding="utf-8"), f"profiles/{name}.toml"


def profile_text(name_or_path: str | Path) -> tuple[str, str]:
    """Text and display name of a shipped profile (by name) or of a profile file (by path)."""
    path = Path(name_or_path)
    if path.suffix == ".toml" or path.exists():
        try:
            return path.read_text(encoding="utf-8"), str(path)
        except OSError as exc:
            raise InputError(f"cannot read profile ({exc.strerror})", path=str(path),
                             fix="check the path, or give a shipped profile's name: "
                                 + ", ".join(shipped_profile_names())) from exc
    return shipped_text(str(name_or_path))
