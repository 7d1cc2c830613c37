"""Pure codecs for IEEE 488.2 / SCPI replies: bytes in, values out, no I/O.

Clauses cited are those of IEEE Std 488.2-1992 ("Codes, Formats, Protocols and Common
Commands") and SCPI-1999 Volume 1 ("Syntax and Style") / Volume 2 ("Command Reference"),
cited from memory.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Literal

import numpy as np

from lineproof.values import InstrumentIdentity

#: Largest payload a definite-length block may declare before we refuse it (bytes).
#: 10,001 complex points as REAL,64 are 160 kB; 64 MiB leaves room for any sweep while
#: stopping a corrupt header ("#9999999999") from making us wait for or allocate gigabytes.
DEFAULT_BLOCK_CAP = 64 * 1024 * 1024


class CodecError(ValueError):
    """Bytes that do not follow the protocol; the session turns it into a ReplyError."""


@dataclass(frozen=True)
class BlockHeader:
    """The header of an arbitrary block: its own length and the payload's (None = indefinite)."""

    header_length: int
    payload_length: int | None


def parse_block_header(data: bytes, cap: int = DEFAULT_BLOCK_CAP) -> BlockHeader | None:
    """Parse the start of an arbitrary block; None while more bytes are needed.

    IEEE 488.2 §8.7.9 definite length: ``#`` then one non-zero digit n, then n digits giving
    the payload length.  §8.7.10 indefinite length: ``#0``, payload ended by NL^END.
    Leading whitespace before ``#`` is tolerated (§7.4.1.2 allows it in front of program
    data, and several instruments emit it in front of response data).
    """
    stripped = data.lstrip(b" \t\r\n")
    skipped = len(data) - len(stripped)
    if not stripped:
        return None
    if stripped[:1] != b"#":
        raise CodecError(f"a block must start with '#', got {stripped[:16]!r}")
    if len(stripped) < 2:
        return None
    digit = stripped[1:2]
    if not digit.isdigit():
        raise CodecError(f"block header digit must be 0-9, got {digit!r}")
    count = int(digit)
    if count == 0:
        return BlockHeader(skipped + 2, None)
    if len(stripped) < 2 + count:
        return None
    length_text = stripped[2 : 2 + count]
    if not length_text.isdigit():
        raise CodecError(f"block length must be {count} digits, got {length_text!r}")
    length = int(length_text)
    if length > cap:
        raise CodecError(f"block declares {length} bytes, more than the cap of {cap} bytes")
    return BlockHeader(skipped + 2 + count, length)


def encode_definite_block(payload: bytes) -> bytes:
    """IEEE 488.2 §8.7.9 definite-length block around ``payload``."""
    length = str(len(payload)).encode()
    if len(length) > 9:
        raise CodecError("payload too large for a definite-length block")
    return b"#" + str(len(length)).encode() + length + payload


ByteOrder = Literal["big", "little"]
RealFormat = Literal["REAL,32", "REAL,64"]

_REAL_SIZES: dict[str, int] = {"REAL,32": 4, "REAL,64": 8}


def real_dtype(data_format: RealFormat, byte_order: ByteOrder) -> np.dtype:
    """numpy dtype for an IEEE 754 block: SCPI-1999 Vol 2 FORMat:DATA REAL,32|64 and
    FORMat:BORDer NORMal (big-endian, the IEEE 488.2 default) or SWAPped (little-endian)."""
    if data_format not in _REAL_SIZES:
        raise CodecError(f"unknown real format {data_format!r}")
    prefix = ">" if byte_order == "big" else "<"
    return np.dtype(f"{prefix}f{_REAL_SIZES[data_format]}")


def decode_real_payload(payload: bytes, data_format: RealFormat, byte_order: ByteOrder) -> np.ndarray:
    """Decode a block payload of IEEE 754 numbers to float64."""
    dtype = real_dtype(data_format, byte_order)
    if len(payload) % dtype.itemsize:
        raise CodecError(
            f"payload of {len(payload)} bytes is not a whole number of {data_format} values"
        )
    return np.frombuffer(payload, dtype=dtype).astype(np.float64)


def encode_real_payload(values: np.ndarray, data_format: RealFormat, byte_order: ByteOrder) -> bytes:
    return np.asarray(values, dtype=real_dtype(data_format, byte_order)).tobytes()


def decode_complex_payload(payload: bytes, data_format: RealFormat, byte_order: ByteOrder) -> np.ndarray:
    """Decode a block payload of (re, im) pairs of IEEE 754 numbers straight to complex128.

    A pair of REAL,64 numbers has the memory layout of one complex128 (and a REAL,32 pair
    that of a complex64), so the payload is viewed as complex without splitting and joining
    the pairs; in the native byte order no conversion copy is made at all.
    """
    real = real_dtype(data_format, byte_order)
    if len(payload) % (2 * real.itemsize):
        raise CodecError(
            f"payload of {len(payload)} bytes is not a whole number of {data_format} (re, im) pairs"
        )
    complex_dtype = np.dtype(f"{'>' if byte_order == 'big' else '<'}c{2 * real.itemsize}")
    return np.frombuffer(payload, dtype=complex_dtype).astype(np.complex128, copy=False)


def interleaved_to_complex(values: np.ndarray) -> np.ndarray:
    """Pairs (re, im, re, im, ...) to complex, the usual layout of complex trace data.

    float64 pairs have the memory layout of complex128, so the pairs are viewed, not copied.
    """
    if values.size % 2:
        raise CodecError(f"{values.size} numbers cannot be (real, imaginary) pairs")
    return np.ascontiguousarray(values, dtype=np.float64).view(np.complex128)


_NUMBER = re.compile(rb"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")


def parse_number_list(text: bytes | str) -> np.ndarray:
    """An ASCII list of decimal numbers separated by commas (IEEE 488.2 §8.7.2 NR1/NR2/NR3
    response data, joined by the §8.4.2 response data separator ',') or whitespace.

    Rejects anything that is not a number: ``nan``, ``inf`` and stray words are errors,
    never data.
    """
    raw = text.encode() if isinstance(text, str) else text
    raw = raw.strip()
    if not raw:
        return np.empty(0)
    fields = raw.split(b",") if b"," in raw else raw.split()
    # Fast path: numpy converts the whole list at C speed; it also takes what no NRf
    # number is (nan, inf, 1_0), so those are looked for before the result is trusted.
    if b"_" not in raw:
        try:
            values = np.array(fields, dtype=np.float64)
        except ValueError:
            pass
        else:
            if np.isfinite(values).all():
                return values
    for index, item in enumerate(fields):
        if not _NUMBER.match(item.strip()):
            raise CodecError(f"item {index} of a number list is not a number: {item[:32]!r}")
    raise CodecError("a number list holds a value that is not a finite number")


def parse_identity(reply: str, resource: str = "") -> InstrumentIdentity:
    """IEEE 488.2 §10.14 *IDN? reply: four comma-separated fields
    (manufacturer, model, serial number or 0, firmware level or 0)."""
    fields = [field.strip() for field in reply.strip().split(",")]
    if len(fields) != 4 or not fields[0]:
        raise CodecError(f"*IDN? reply must have four comma-separated fields, got {reply!r}")
    return InstrumentIdentity(fields[0], fields[1], fields[2], fields[3], resource)


_ERROR_ENTRY = re.compile(r'^\s*([+-]?\d+)\s*,\s*"(.*)"\s*$', re.DOTALL)


def parse_error_entry(reply: str) -> tuple[int, str]:
    """SCPI-1999 Vol 2 §21.8 SYSTem:ERRor[:NEXT]? reply: ``<code>,"<text>"``; code 0 means
    the queue is empty."""
    match = _ERROR_ENTRY.match(reply)
    if not match:
        raise CodecError(f'an error-queue entry must look like <code>,"<text>", got {reply!r}')
    return int(match.group(1)), match.group(2).replace('""', '"')


def parse_opc_reply(reply: str) -> None:
    """IEEE 488.2 §10.19 *OPC? places ASCII '1' in the output queue when operations end."""
    if reply.strip() != "1":
        raise CodecError(f"*OPC? must answer 1, got {reply!r}")


_NR1 = re.compile(r"^\s*\+?(\d{1,5})\s*$")


def parse_status_register(reply: str) -> int:
    """The value of a status register (``*ESR?``, ``*STB?``, SCPI ``STATus:...?``): one
    IEEE 488.2 §8.7.2 NR1 number, 0..65535 (the 488.2 registers have 8 bits, SCPI's 16)."""
    match = _NR1.match(reply)
    if not match or int(match.group(1)) > 0xFFFF:
        raise CodecError(f"a status register must read as a whole number 0..65535, got {reply!r}")
    return int(match.group(1))


_CHANNEL = re.compile(r"^(\d+)!(\d+)$")


def parse_channel(entry: str) -> tuple[int, int]:
    """One ``module!channel`` entry of a SCPI channel list (SCPI-1999 Vol 1 §8.3.2), e.g.
    ``"1!3"`` -> (1, 3)."""
    match = _CHANNEL.match(entry.strip())
    if not match:
        raise CodecError(f"a channel is written module!channel, such as 1!3, got {entry!r}")
    return int(match.group(1)), int(match.group(2))


def format_channel_list(entries: list[tuple[int, int]]) -> str:
    """A SCPI channel list ``(@1!1,2!1)`` of the given (module, channel) entries."""
    return "(@" + ",".join(f"{module}!{channel}" for module, channel in entries) + ")"


def format_channel_ranges(modules: int, channels_per_module: int) -> str:
    """Every channel of a switch as one range per module: ``(@1!1:1!8,2!1:2!8)``
    (SCPI-1999 Vol 1 §8.3.2 ranges are inclusive and expand channel by channel)."""
    ranges = [f"{m}!1:{m}!{channels_per_module}" for m in range(1, modules + 1)]
    return "(@" + ",".join(ranges) + ")"
