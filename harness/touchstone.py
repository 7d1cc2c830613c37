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
_KEY = re.compile(r"^[a-z0-9][a-z0-9_.\-]*$")
#: Serial numbers become file names: letters, digits, '.', '_' and '-' only, no leading dot.
SERIAL_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")


def check_serial(serial: str, where: str = "serial") -> str:
    """Return ``serial`` if it is safe as a file name and a record key, else InputError."""
    if not isinstance(serial, str) or not SERIAL_PATTERN.match(serial) or ".." in serial:
        shown = serial if isinstance(serial, str) and len(serial) <= 40 else f"{str(serial)[:40]}..."
        raise InputError(
            f"serial number {shown!r} is not allowed",
            key=where,
            fix="use 1-64 letters, digits, '.', '_' or '-', starting with a letter or digit, with no '..'",
        )
    return serial


def _clean_value(value: object) -> str:
    text = str(value)
    return " ".join(text.replace("!", "(excl)").split())


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


def write_new_file(folder: Path, stem: str, suffix: str, text: str) -> Path:
    """Write ``text`` to ``folder/stem.suffix`` atomically, never replacing a file.

    The data goes to a temporary file in the same folder, is flushed and fsync'ed, then
    linked under its final name (a hard link fails if the name exists, so an existing
    result is never overwritten; a second result for the same stem gets ``-2``, ``-3``...).
    """
    folder.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(dir=folder, prefix=".partial-", suffix=suffix)
    try:
        with os.fdopen(handle, "w", encoding="ascii", newline="\n") as stream:
            stream.write(text)
            stream.flush()
            os.fsync(stream.fileno())
        for attempt in range(1, 1000):
            name = f"{stem}{suffix}" if attempt == 1 else f"{stem}-{attempt}{suffix}"
            target = folder / name
            try:
                os.link(temporary, target)
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
            found[key.strip()] = value.strip()
    return found


def metadata_items(mapping: Mapping[str, object]) -> list[tuple[str, object]]:
    return list(mapping.items())
