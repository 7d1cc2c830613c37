"""Where each key of a TOML text is set: ``tomllib`` gives values but no line numbers, so
:class:`KeyLines` scans the text itself and maps each key path to the line that sets it.

Key paths are dotted; a table of an array of tables and an element of an array are counted
from 1 in square brackets (``station.analyzer.profile``, ``band[2].max_vswr``).  It lives in
``drivers/`` so that profile files (drivers) and sequences, kits and stations (the harness,
through :mod:`lineproof.toml_problems`) name lines the same way; it imports nothing of ours.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")


def _split_key(text: str) -> tuple[list[str], int] | None:
    """Parse a (dotted, possibly quoted) key at the start of ``text``; return its parts and the
    index just after it, or None when ``text`` does not start with a key."""
    parts: list[str] = []
    index = 0
    while True:
        while index < len(text) and text[index] in " \t":
            index += 1
        if index >= len(text):
            return None
        quote = text[index]
        if quote in "\"'":
            end = index + 1
            while end < len(text) and text[end] != quote:
                end += 2 if quote == '"' and text[end] == "\\" else 1
            if end >= len(text):
                return None
            parts.append(text[index + 1:end])
            index = end + 1
        else:
            match = _BARE_KEY.match(text, index)
            if not match:
                return None
            parts.append(match.group())
            index = match.end()
        while index < len(text) and text[index] in " \t":
            index += 1
        if index < len(text) and text[index] == ".":
            index += 1
            continue
        return parts, index


@dataclass
class _Frame:
    """An open array (``path`` names it; ``count`` elements seen) or inline table."""

    path: str
    is_array: bool
    count: int = 0
    expecting: bool = True


class _ValueScanner:
    """Follows a value across lines: strings (all four kinds), arrays and inline tables."""

    def __init__(self) -> None:
        self.string: str | None = None  # the open delimiter of a string that spans lines
        self.frames: list[_Frame] = []

    def busy(self) -> bool:
        return self.string is not None or bool(self.frames)

    def feed(self, text: str, index: int, line: int, found: dict[str, int], path: str | None) -> None:
        while index < len(text):
            if self.string is not None:
                index = self._in_string(text, index)
                continue
            char = text[index]
            if char == "#":
                return
            top = self.frames[-1] if self.frames else None
            if top is not None and top.is_array and top.expecting and char not in " \t,]":
                top.count += 1
                top.expecting = False
                found.setdefault(f"{top.path}[{top.count}]", line)
            if text.startswith('"""', index) or text.startswith("'''", index):
                self.string = text[index:index + 3]
                index += 3
            elif char in "\"'":
                self.string = char
                index += 1
            elif char == "[":
                parent = (f"{top.path}[{top.count}]" if top is not None and top.is_array else path) or ""
                self.frames.append(_Frame(parent, True))
                index += 1
            elif char == "{":
                self.frames.append(_Frame("", False))
                index += 1
            elif char in "]}":
                if self.frames:
                    self.frames.pop()
                index += 1
            else:
                if char == "," and top is not None and top.is_array:
                    top.expecting = True
                index += 1
        if self.string is not None and len(self.string) == 1:
            self.string = None  # a one-line string cannot span lines (invalid TOML; tomllib says so)

    def _in_string(self, text: str, index: int) -> int:
        delimiter = self.string or ""
        while index < len(text):
            if delimiter[0] == '"' and text[index] == "\\":
                index += 2
                continue
            if text.startswith(delimiter, index):
                # A multi-line string may end with up to two extra quotes before the delimiter.
                end = index + len(delimiter)
                while len(delimiter) == 3 and end < len(text) and text[end] == delimiter[0]:
                    end += 1
                self.string = None
                return end
            index += 1
        return index


class KeyLines:
    """Where each key of a TOML text is set: ``line_of("band[2].max_vswr")`` -> 17."""

    def __init__(self, text: str) -> None:
        self._found: dict[str, int] = {}
        self._arrays: dict[str, int] = {}
        self._scan(text)

    def line_of(self, key: str | None) -> int | None:
        """The line of ``key``, else of its nearest parent that has one, else None."""
        while key:
            if key in self._found:
                return self._found[key]
            cut = max(key.rfind("."), key.rfind("["))
            key = key[:cut] if cut > 0 else ""
        return None

    def _resolve(self, parts: list[str], last_is_array: bool) -> str:
        path = ""
        for position, part in enumerate(parts):
            path = f"{path}.{part}" if path else part
            if last_is_array and position == len(parts) - 1:
                self._arrays[path] = self._arrays.get(path, 0) + 1
            if path in self._arrays:
                path = f"{path}[{self._arrays[path]}]"
        return path

    def _scan(self, text: str) -> None:
        prefix = ""
        scanner = _ValueScanner()
        for line, raw in enumerate(text.splitlines(), 1):
            if scanner.busy():
                scanner.feed(raw, 0, line, self._found, None)
                continue
            stripped = raw.strip()
            if not stripped or stripped.startswith("#"):
                continue
            if stripped.startswith("["):
                is_array = stripped.startswith("[[")
                parsed = _split_key(stripped[2 if is_array else 1:])
                if parsed is not None:
                    prefix = self._resolve(parsed[0], is_array)
                    self._found.setdefault(prefix, line)
                    if is_array:
                        self._found.setdefault(prefix[:prefix.rfind("[")], line)
                continue
            parsed = _split_key(stripped)
            if parsed is None or parsed[1] >= len(stripped) or stripped[parsed[1]] != "=":
                continue
            path = ".".join([prefix, *parsed[0]]) if prefix else ".".join(parsed[0])
            self._found.setdefault(path, line)
            scanner.feed(stripped, parsed[1] + 1, line, self._found, path)
