"""Reading user TOML files so that every problem is found at once and named precisely.

``tomllib`` gives values but no line numbers, so :class:`KeyLines` (in
:mod:`lineproof.drivers.toml_lines`, shared with profile files) scans the text itself and
maps each key path to the line that sets it.  Key paths are dotted; a table of an array of
tables and an element of an array are counted from 1 in square brackets::

    station.analyzer.profile     band[2].max_vswr     devices.serials[3]

:class:`Problems` collects :class:`InputError`\\ s (file, key, line, problem, fix) instead of
stopping at the first, and :class:`TableReader` reads typed values through it.  Nothing here
evaluates user text: values are only compared, converted with ``float``/``int`` and checked.
"""

from __future__ import annotations

import re
import tomllib
from collections.abc import Iterable, Mapping
from typing import Any

from lineproof.drivers.toml_lines import KeyLines as KeyLines
from lineproof.errors import InputError

_TOML_POSITION = re.compile(r"\(at line (\d+), column (\d+)\)")


# -- problems -----------------------------------------------------------------------------------


class Problems:
    """Every problem found in one file (and the files read with it, such as a station file),
    each an :class:`InputError` with its line."""

    def __init__(self, source: str, lines: KeyLines | None = None) -> None:
        self.source = source
        self.lines = lines
        self.items: list[InputError] = []
        self._other_lines: dict[str, KeyLines] = {}

    def read_with(self, source: str, lines: KeyLines) -> None:
        """Another file checked with this one: problems added for its keys get their lines."""
        self._other_lines[source] = lines

    def add(self, key: str | None, problem: str, fix: str | None = None, *, source: str | None = None,
            line: int | None = None) -> None:
        """Record one problem; its line is looked up from ``key`` (in ``source``) unless given."""
        lines = self.lines if source is None or source == self.source else self._other_lines.get(source)
        if line is None and lines is not None:
            line = lines.line_of(key)
        self.items.append(InputError(problem, path=source or self.source, key=key, line=line, fix=fix))

    def absorb(self, error: InputError, key: str | None = None, *, source: str | None = None,
               what: str = "the file") -> None:
        """Keep an error raised by another loader (a kit, a profile, a scenario) with its own file,
        line and key, and name ``key`` (in ``source``, this file by default) as where it was used."""
        if error.path and error.path != (source or self.source):
            self.items.append(error)
            if key is not None:
                self.add(key, f"{what} named here has a problem (see {error.path} above)",
                         "correct that file or name another one", source=source)
        else:
            self.add(key or error.key, error.problem, error.fix, source=source)

    def __bool__(self) -> bool:
        return bool(self.items)


def parse_toml(text: str, source: str, problems: Problems) -> dict[str, Any] | None:
    """The parsed document, or None with the syntax error (and its line) recorded."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        position = _TOML_POSITION.search(message)
        line = int(position.group(1)) if position else None
        problem = _TOML_POSITION.sub("", message).strip()
        problems.add(None, f"not valid TOML: {problem}", "correct the TOML syntax at that line", line=line)
        return None


_REQUIRED = object()


class TableReader:
    """Typed access to one table of a parsed TOML document, recording problems as it goes."""

    def __init__(self, data: Mapping[str, Any], prefix: str, problems: Problems) -> None:
        self.data = data
        self.prefix = prefix
        self.problems = problems

    def key(self, name: str) -> str:
        return f"{self.prefix}.{name}" if self.prefix else name

    def has(self, name: str) -> bool:
        return name in self.data

    def reject_unknown(self, allowed: Iterable[str]) -> None:
        allowed = set(allowed)
        for name in self.data:
            if name not in allowed:
                nearest = _nearest(name, allowed)
                hint = f"did you mean {nearest!r}? " if nearest else ""
                self.problems.add(self.key(name), "unknown key",
                                  f"{hint}remove it or use one of: {', '.join(sorted(allowed))}")

    def get(self, name: str, kind: type | tuple[type, ...], default: Any = _REQUIRED, fix: str = "") -> Any:
        """The value of ``name`` if it has the right type; ``default`` if absent; None (and a
        recorded problem) if it is missing or mistyped."""
        if name not in self.data:
            if default is _REQUIRED:
                self.problems.add(self.key(name), "missing key", fix or f"add {name} = ...")
                return None
            return default
        value = self.data[name]
        kinds = kind if isinstance(kind, tuple) else (kind,)
        if float in kinds and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)
        if not isinstance(value, kinds) or (isinstance(value, bool) and bool not in kinds):
            expected = " or ".join(_TYPE_WORDS.get(k, k.__name__) for k in kinds)
            self.problems.add(self.key(name), f"must be {expected}, got {_shown(value)}",
                              fix or f"give {name} as {expected}")
            return None
        return value

    def number(self, name: str, default: Any = _REQUIRED, *, minimum: float | None = None,
               above: float | None = None, fix: str = "") -> float | None:
        value = self.get(name, float, default, fix)
        if value is None or value is default:
            return value
        if value != value or value in (float("inf"), float("-inf")):
            self.problems.add(self.key(name), f"must be a finite number, got {value}", fix or None)
            return None
        if minimum is not None and value < minimum:
            self.problems.add(self.key(name), f"must be at least {minimum:g}, got {value:g}", fix or None)
            return None
        if above is not None and not value > above:
            self.problems.add(self.key(name), f"must be greater than {above:g}, got {value:g}", fix or None)
            return None
        return value

    def choice(self, name: str, choices: Iterable[str], default: Any = _REQUIRED) -> str | None:
        options = list(choices)
        value = self.get(name, str, default, f"use one of: {', '.join(options)}")
        if isinstance(value, str) and value not in options:
            self.problems.add(self.key(name), f"unknown value {_shown(value)}", f"use one of: {', '.join(options)}")
            return None
        return value

    def table(self, name: str, required: bool = False) -> TableReader | None:
        value = self.data.get(name)
        if value is None:
            if required:
                self.problems.add(self.key(name), "missing table", f"add a [{self.key(name)}] table")
            return None
        if not isinstance(value, dict):
            self.problems.add(self.key(name), f"must be a table, got {_shown(value)}",
                              f"write it as a [{self.key(name)}] table")
            return None
        return TableReader(value, self.key(name), self.problems)

    def tables(self, name: str) -> list[TableReader]:
        """The tables of an array of tables (``[[name]]``), each with its 1-based index."""
        value = self.data.get(name)
        if value is None:
            return []
        if not isinstance(value, list) or not all(isinstance(item, dict) for item in value):
            self.problems.add(self.key(name), "must be an array of tables",
                              f"write each entry as a [[{self.key(name)}]] table")
            return []
        return [TableReader(item, f"{self.key(name)}[{index}]", self.problems) for index, item in enumerate(value, 1)]


_TYPE_WORDS = {str: "a string", float: "a number", int: "a whole number", bool: "true or false",
               list: "an array", dict: "a table"}


def _shown(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _nearest(name: str, allowed: set[str]) -> str | None:
    """The allowed key closest to a misspelt one (by shared prefix and length), if any is close."""
    import difflib

    matches = difflib.get_close_matches(name, sorted(allowed), n=1, cutoff=0.75)
    return matches[0] if matches else None
