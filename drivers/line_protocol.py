"""Pure codecs for terminal-style line protocols: bytes and text in, values out, no I/O.

Such an instrument echoes each command line, answers with reply lines and then sends a
prompt; an error is a reply line of its own form.  Our simulated serial analyzer speaks
one (simulated-instruments/PROTOCOLS.md §2); a profile states the prompt, the error-line
pattern and the word that ends a block of number rows, so another instrument of this
kind needs only a profile.
"""

from __future__ import annotations

import re

import numpy as np

from lineproof.drivers.ieee488 import CodecError

#: A decimal number as line protocols write it (PROTOCOLS.md §2: "1.44e8" allowed).
_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")


def compile_error_pattern(pattern: str) -> re.Pattern[str]:
    """An error-line pattern must be a regular expression with groups ``code`` and ``text``."""
    try:
        compiled = re.compile(pattern)
    except re.error as exc:
        raise CodecError(f"not a regular expression ({exc})") from exc
    if not {"code", "text"} <= set(compiled.groupindex):
        raise CodecError("the pattern needs named groups (?P<code>...) and (?P<text>...)")
    return compiled


def parse_error_line(line: str, pattern: re.Pattern[str]) -> tuple[int, str] | None:
    """``(code, text)`` when ``line`` is an error report, else None."""
    match = pattern.fullmatch(line)
    if match is None:
        return None
    try:
        code = int(match.group("code"))
    except ValueError as exc:
        raise CodecError(f"error line {line!r} has a code that is not an integer") from exc
    return code, match.group("text")


def strip_echo(line: str, command: str, prompt: str | None) -> None:
    """Check that ``line`` is the echo of ``command``.

    A prompt may stand in front of the echo: the instrument sends one when the port opens,
    and a host that opened the port earlier still has it unread.
    """
    if prompt:
        while line.startswith(prompt):
            line = line[len(prompt):]
    if line != command:
        raise CodecError(f"the instrument echoed {line[:80]!r} for the command {command!r}")


def parse_end_line(line: str, end_word: str) -> int | None:
    """The count of an ``<end_word> <count>`` line, or None when ``line`` is not one."""
    fields = line.split()
    if len(fields) != 2 or fields[0].lower() != end_word.lower():
        return None
    if not fields[1].isdigit():
        raise CodecError(f"the end line {line!r} must give a whole count")
    return int(fields[1])


def parse_rows(lines: list[str], columns: int, end_word: str) -> np.ndarray:
    """Rows of ``columns`` numbers separated by white space, ended by ``<end_word> <count>``
    whose count must equal the number of rows.  Returns an array of shape (rows, columns).

    Any row that is not exactly ``columns`` numbers, a missing end line, a wrong count or
    anything after the end line is an error, never data.
    """
    if not lines:
        raise CodecError(f"no rows and no '{end_word} <count>' line")
    count = parse_end_line(lines[-1], end_word)
    if count is None:
        raise CodecError(f"the rows do not end with '{end_word} <count>' (last line {lines[-1][:80]!r})")
    rows = lines[:-1]
    if count != len(rows):
        raise CodecError(f"'{lines[-1]}' announces {count} rows, {len(rows)} came")
    values = np.empty((len(rows), columns))
    for index, row in enumerate(rows):
        fields = row.split()
        if len(fields) != columns or not all(_NUMBER.match(f) for f in fields):
            raise CodecError(f"row {index + 1} is not {columns} numbers: {row[:80]!r}")
        values[index] = [float(f) for f in fields]
    return values
