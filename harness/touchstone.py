"""Touchstone result files with a metadata header, written atomically and never overwritten.

Every metadata line is ``!lineproof: <key> = <value>``.  The fixed tag matters: scikit-rf's
reader treats comment lines that start with words such as ``Port`` or ``Gamma`` as
instructions (port names, HFSS port data) and drops blank comment lines, so a free-form
header can be lost or break the file.  Behind the tag, keys are lower-case dotted names and
values one line of text; :func:`read_metadata` recovers them from what scikit-rf returns.
The data section follows Touchstone 1.1 (``# Hz S RI R <z0>``, one line per frequency).
"""

from __future__ import annotations

import os
import re
import tempfile
from collections.abc import Iterable, Mapping
from pathlib import Path

import numpy as np

from lineproof.errors import InputError

TAG = "lineproof:"
#: The process's file-creation mask, read once at import (reading it means setting it).
_UMASK = os.umask(0o022)
os.umask(_UMASK)
_KEY = re.compile(r"^[a-z0-9][a-z0-9_.\-]*$")
#: Serial numbers become file names: letters, digits, '.', '_' and '-' only, no leading dot.
SERIAL_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")
SERIAL_RULE = "use 1-64 letters, digits, '.', '_' or '-', starting with a letter or digit, with no '..'"


#: Names that Windows reserves for devices, in any case and with any extension (Microsoft,
#: "Naming Files, Paths, and Namespaces"): a result file must never be called ``CON.s1p``.
_RESERVED_STEMS = frozenset(
    ["con", "prn", "aux", "nul"] + [f"com{i}" for i in range(10)] + [f"lpt{i}" for i in range(10)]
)


def serial_problem(serial: object) -> str | None:
    """What makes ``serial`` unusable as a file name and a record key, or None if it is fine."""
    if not isinstance(serial, str):
        return f"a serial number must be text, got {type(serial).__name__}"
    shown = serial if len(serial) <= 40 else f"{serial[:40]}... ({len(serial)} characters)"
    if not SERIAL_PATTERN.match(serial) or ".." in serial:
        return f"serial number {shown!r} is not allowed"
    if serial.split(".")[0].lower() in _RESERVED_STEMS:
        return f"serial number {shown!r} is a name the operating system reserves"
    return None


def check_serial(serial: str, where: str = "serial") -> str:
    """Return ``serial`` if it is safe as a file name and a record key, else InputError."""
    problem = serial_problem(serial)
    if problem is not None:
        raise InputError(
            problem,
            key=where,
            fix=SERIAL_RULE,
        )
    return serial


_ESCAPED = re.compile(r"\\(\\|u[0-9a-fA-F]{4}|U[0-9a-fA-F]{8})")


def _clean_value(value: object) -> str:
    """One line of ASCII text: whitespace runs become one space, and a backslash, a control
    character or a character beyond ASCII is escaped (\\\\, \\uXXXX) -- Touchstone files are
    ASCII.  A '!' inside a comment line is kept: scikit-rf 2.2 reads it back unchanged (tested),
    so a SCPI channel list such as (@1!3) stays legible."""
    text = " ".join(str(value).split())
    escaped = []
    for char in text:
        if char == "\\":
            escaped.append("\\\\")
        elif 32 <= ord(char) < 127:
            escaped.append(char)
        elif ord(char) <= 0xFFFF:
            escaped.append(f"\\u{ord(char):04x}")
        else:
            escaped.append(f"\\U{ord(char):08x}")
    return "".join(escaped)


def _unescape(text: str) -> str:
    def replace(match: re.Match[str]) -> str:
        body = match.group(1)
        return "\\" if body == "\\" else chr(int(body[1:], 16))

    return _ESCAPED.sub(replace, text)


def format_header(metadata: Iterable[tuple[str, object]]) -> str:
    lines = []
    for key, value in metadata:
        if not _KEY.match(key):
            raise ValueError(f"metadata key {key!r} must be lower-case letters, digits, '.', '_' or '-'")
        lines.append(f"!{TAG} {key} = {_clean_value(value)}\n")
    return "".join(lines)


def format_one_port(frequencies_hz: np.ndarray, reflection: np.ndarray, z0: float,
                    metadata: Iterable[tuple[str, object]]) -> str:
    """Touchstone 1.1 one-port text: header, option line, ``f  re  im`` rows."""
    rows = np.column_stack([frequencies_hz, np.real(reflection), np.imag(reflection)])
    body = "".join(f"{f:.10g} {re_:.12g} {im:.12g}\n" for f, re_, im in rows)
    return format_header(metadata) + f"# Hz S RI R {z0:g}\n" + body


def format_two_port(frequencies_hz: np.ndarray, s: np.ndarray, z0: float,
                    metadata: Iterable[tuple[str, object]]) -> str:
    """Touchstone 1.1 two-port text: header, option line, one row per frequency with
    ``f  S11  S21  S12  S22`` (real and imaginary parts) -- the order Touchstone 1.1 gives
    two-port data in (its N21 before N12)."""
    columns = [frequencies_hz]
    for i, j in ((0, 0), (1, 0), (0, 1), (1, 1)):
        columns += [np.real(s[:, i, j]), np.imag(s[:, i, j])]
    rows = np.column_stack(columns)
    body = "".join(f"{row[0]:.10g} " + " ".join(f"{x:.12g}" for x in row[1:]) + "\n" for row in rows)
    return format_header(metadata) + f"# Hz S RI R {z0:g}\n" + body


def make_readable(descriptor: int) -> None:
    """Give a file made by ``tempfile.mkstemp`` (owner-only) the usual permissions (umask)."""
    if hasattr(os, "fchmod"):
        os.fchmod(descriptor, 0o666 & ~_UMASK)


def write_new_file(folder: Path, stem: str, suffix: str, text: str, encoding: str = "ascii") -> Path:
    """Write ``text`` to ``folder/stem.suffix`` atomically, never replacing a file.

    The data goes to a temporary file in the same folder, is flushed and fsync'ed, then
    linked under its final name (a hard link fails if the name exists, so an existing
    result is never overwritten; a second result for the same stem gets ``~2``, ``~3``...:
    '~' is not allowed in a serial number, so such a name never collides with another serial's).
    """
    folder.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(dir=folder, prefix=".partial-", suffix=suffix)
    try:
        make_readable(handle)
        with os.fdopen(handle, "w", encoding=encoding, newline="\n") as stream:
            stream.write(text)
            stream.flush()
            os.fsync(stream.fileno())
        for attempt in range(1, 1000):
            name = f"{stem}{suffix}" if attempt == 1 else f"{stem}~{attempt}{suffix}"
            target = folder / name
            try:
                _place_without_replacing(temporary, target)
            except FileExistsError:
                continue
            _fsync_folder(folder)
            return target
        raise OSError(f"too many files named {stem}*{suffix} in {folder}")
    finally:
        try:
            os.unlink(temporary)
        except FileNotFoundError:
            pass


def _place_without_replacing(temporary: str, target: Path) -> None:
    """Give the finished temporary file its final name; FileExistsError if the name is taken.

    A hard link does it atomically.  Where the file system has no hard links (FAT, some network
    shares), Windows' rename refuses an existing name by itself; elsewhere the name is first
    reserved with an exclusive create and then replaced -- a kill between the two leaves an
    empty file that no database row names, which a resumed run sets aside.
    """
    try:
        os.link(temporary, target)
        return
    except FileExistsError:
        raise
    except OSError:
        if os.name == "nt":
            os.rename(temporary, target)
            return
    descriptor = os.open(target, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666)
    os.close(descriptor)
    os.replace(temporary, target)


def _fsync_folder(folder: Path) -> None:
    try:
        descriptor = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(descriptor)
    except OSError:
        pass
    finally:
        os.close(descriptor)


def read_metadata(comments: str) -> dict[str, str]:
    """Metadata from the comment text scikit-rf gives (``Network.comments``)."""
    found: dict[str, str] = {}
    for line in comments.splitlines():
        line = line.strip()
        if not line.startswith(TAG):
            continue
        # Keys never hold '='; the value may be empty (and then its trailing space is gone).
        key, separator, value = line[len(TAG):].partition("=")
        if separator:
            found[key.strip()] = _unescape(value.strip())
    return found


def metadata_items(mapping: Mapping[str, object]) -> list[tuple[str, object]]:
    return list(mapping.items())
