"""The serving side of SCPI: split program messages, match headers, keep the error queue.

Written for the simulators only; it shares no code with the drivers, so a misreading of the
standard on one side shows up as a failing test instead of hiding in both.

Rules implemented (SCPI-1999 Vol 1 "Syntax and Style"):
- §6.2.1 mnemonics have a short form (the upper-case letters) and a long form; either is
  accepted, in any case; a trailing numeric suffix selects a channel or trace.
- §6.2.4 a program message is units separated by ';'; after a ';' the next unit is relative
  to the previous unit's node unless it starts with ':' or is a common command ('*').
- §6.2.2 nodes in [brackets] are optional.
- §21.8 (Vol 2) the error queue holds at most a few entries; overflow replaces the newest
  with -350 "Queue overflow"; reading an empty queue gives 0,"No error".
"""

from __future__ import annotations

import re
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass

#: Handler signature: (arguments text, numeric suffixes found in the header) -> reply or None.
Handler = Callable[[str, tuple[int, ...]], "bytes | str | None"]


class ScpiCommandError(Exception):
    """Raised by a handler to put an entry in the error queue."""

    def __init__(self, code: int, text: str) -> None:
        super().__init__(f"{code},{text}")
        self.code = code
        self.text = text


@dataclass(frozen=True)
class _Node:
    short: str
    long: str
    optional: bool


def _parse_pattern(pattern: str) -> tuple[tuple[_Node, ...], bool]:
    """``[SENSe]:FREQuency:STARt?`` -> nodes, is_query."""
    query = pattern.endswith("?")
    body = pattern.rstrip("?").lstrip(":")
    nodes = []
    for part in re.findall(r"\[:?([A-Za-z*]+)\]|:?([A-Za-z*]+)", body):
        word = part[0] or part[1]
        optional = bool(part[0])
        short = "".join(ch for ch in word if ch.isupper() or ch == "*") or word.upper()
        nodes.append(_Node(short.upper(), word.upper(), optional))
    return tuple(nodes), query


_TOKEN = re.compile(r"^([A-Za-z*][A-Za-z]*?)(\d*)$")


def _match(nodes: tuple[_Node, ...], tokens: list[str]) -> tuple[int, ...] | None:
    """Match header tokens against pattern nodes; returns numeric suffixes or None."""

    def walk(i: int, j: int, suffixes: tuple[int, ...]) -> tuple[int, ...] | None:
        if i == len(nodes):
            return suffixes if j == len(tokens) else None
        node = nodes[i]
        if j < len(tokens):
            found = _TOKEN.match(tokens[j])
            if found:
                word, digits = found.group(1).upper(), found.group(2)
                if word in (node.short, node.long):
                    result = walk(i + 1, j + 1, suffixes + ((int(digits) if digits else 1),))
                    if result is not None:
                        return result
                elif tokens[j].upper() in (node.short, node.long):
                    result = walk(i + 1, j + 1, suffixes + (1,))
                    if result is not None:
                        return result
        if node.optional:
            return walk(i + 1, j, suffixes + (1,))
        return None

    return walk(0, 0, ())


class ScpiDispatcher:
    """A table of header patterns and the handlers that serve them."""

    QUEUE_DEPTH = 16

    def __init__(self) -> None:
        self._commands: list[tuple[tuple[_Node, ...], bool, Handler]] = []
        self.errors: deque[tuple[int, str]] = deque()
        #: Told the code of every error as it happens (the event status register latches it).
        self.on_error: Callable[[int], None] = lambda code: None

    def add(self, pattern: str, handler: Handler) -> None:
        nodes, query = _parse_pattern(pattern)
        self._commands.append((nodes, query, handler))

    def push_error(self, code: int, text: str) -> None:
        self.on_error(code)
        if len(self.errors) >= self.QUEUE_DEPTH:
            self.errors.pop()
            self.errors.append((-350, "Queue overflow"))
            return
        self.errors.append((code, text))

    def pop_error(self) -> str:
        if not self.errors:
            return '0,"No error"'
        code, text = self.errors.popleft()
        return f'{code},"{text}"'

    def execute(self, message: str) -> list[bytes | str]:
        """Run one program message; returns the replies of its queries in order."""
        replies: list[bytes | str] = []
        path: list[str] = []
        for unit in _split_units(message):
            unit = unit.strip()
            if not unit:
                continue
            header, _, arguments = unit.partition(" ")
            query = header.endswith("?")
            header = header.rstrip("?")
            if header.startswith("*"):
                tokens = [header]
            elif header.startswith(":"):
                tokens = header[1:].split(":")
                path = tokens[:-1]
            else:
                tokens = path + header.split(":")
                path = tokens[:-1]
            reply = self._dispatch(tokens, query, arguments.strip())
            if reply is not None:
                replies.append(reply)
        return replies

    def _dispatch(self, tokens: list[str], query: bool, arguments: str) -> bytes | str | None:
        for nodes, is_query, handler in self._commands:
            if is_query != query:
                continue
            suffixes = _match(nodes, tokens)
            if suffixes is None:
                continue
            try:
                return handler(arguments, suffixes)
            except ScpiCommandError as exc:
                self.push_error(exc.code, exc.text)
                return None
        self.push_error(-113, "Undefined header")
        return None


def _split_units(message: str) -> list[str]:
    """Split on ';' outside quoted strings (SCPI-1999 Vol 1 §6.2.4, §7.3.3 strings)."""
    units, current, quote = [], [], None
    for ch in message:
        if quote:
            current.append(ch)
            if ch == quote:
                quote = None
        elif ch in "\"'":
            quote = ch
            current.append(ch)
        elif ch == ";":
            units.append("".join(current))
            current = []
        else:
            current.append(ch)
    units.append("".join(current))
    return units


def parse_number(text: str) -> float:
    """A decimal numeric program data element (IEEE 488.2 §7.7.2) with optional suffix
    multipliers in Hz (SCPI-1999 Vol 1 §7.7.3: k, M (mega), G)."""
    match = re.fullmatch(r"\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z]*)\s*", text)
    if not match:
        raise ScpiCommandError(-104, "Data type error")
    value = float(match.group(1))
    unit = match.group(2).upper()
    scale = {"": 1.0, "HZ": 1.0, "KHZ": 1e3, "MHZ": 1e6, "MAHZ": 1e6, "GHZ": 1e9, "DBM": 1.0}
    if unit not in scale:
        raise ScpiCommandError(-131, "Invalid suffix")
    return value * scale[unit]


def unquote(text: str) -> str:
    text = text.strip()
    if len(text) >= 2 and text[0] == text[-1] and text[0] in "\"'":
        return text[1:-1]
    raise ScpiCommandError(-151, "Invalid string data")
