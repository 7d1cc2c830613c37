"""The SCPI face of a simulated analyzer, served on a TCP socket on 127.0.0.1.

It answers the IEEE 488.2 common commands and the SCPI error queue (:mod:`.scpi_server`) and
the commands of the project's generic SCPI analyzer profile
(drivers/profiles/generic-scpi-analyzer.toml); PROTOCOLS.md §1 lists them.
"""

from __future__ import annotations

import functools
import re

import numpy as np

from lineproof.simulators.analyzer_sim import SimulatedAnalyzer
from lineproof.simulators.faults import FaultPlan
from lineproof.simulators.scpi import ScpiCommandError, parse_number, unquote
from lineproof.simulators.scpi_server import DataReply, ScpiFront, ScpiTcpServer

__all__ = ["AnalyzerScpiFront", "ScpiTcpServer"]


def _block_header(length: int) -> tuple[bytes, bytes]:
    """IEEE 488.2 §8.7.9 definite-length arbitrary block: '#', the count of length digits,
    the length; the payload follows."""
    digits = str(length).encode()
    return b"#" + str(len(digits)).encode(), digits


@functools.lru_cache(maxsize=8)
def _ascii_template(count: int) -> str:
    """``%.12g,%.12g,...``: one formatting pass for the whole list (twice as fast as
    formatting each number on its own)."""
    return ",".join(["%.12g"] * count)


#: The hundreds, tens and units digit of 0..999 as ASCII, one table per place.
_DIGIT_PLACES = tuple(np.array([f"{n:03d}"[place] for n in range(1000)], dtype="S1").view(np.uint8)
                      for place in range(3))
#: 10**k for k = -300..308 (exact for |k| <= 22, where every trace and grid value falls).
_POWERS = 10.0 ** np.arange(-300, 309)
#: Columns of one NR3 number and its separator: "+d.ddddddddddde+ddd,".
_NR3_WIDTH = 20
_MANTISSA_COLUMNS = (1, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13)  # the decimal point is column 2


def ascii_numbers(values: np.ndarray) -> bytes:
    """A comma-separated list of IEEE 488.2 NR3 numbers (§8.7.4: mantissa, E, signed
    exponent) with 12 significant digits, every one 19 characters wide: ``+1.23456789012e-001``.

    Written by numpy into fixed columns -- the sign, each digit looked up by place from a
    group of three, the exponent -- several times as fast as Python's ``%`` formatting of
    20,002 numbers.  Each number is its value rounded to 12 digits; the scaling to an integer
    mantissa rounds once, so a value within about 1e-5 of a unit of a tie may round the other
    way (still within half a unit, and a hair).  Non-finite values and magnitudes below
    1e-290 go through ``%.12g``.
    """
    x = np.asarray(values, dtype=np.float64).ravel()
    magnitude = np.abs(x)
    if x.size == 0:
        return b""
    if not np.isfinite(x).all() or ((magnitude < 1e-290) & (magnitude > 0)).any():
        return (_ascii_template(x.size) % tuple(x.tolist())).encode("ascii")
    nonzero = magnitude > 0
    exponent = np.floor(np.log10(np.where(nonzero, magnitude, 1.0))).astype(np.intp)
    # The mantissa as a whole number of 12 digits, held in a float (exact below 2**53).
    mantissa = np.rint(magnitude * _POWERS[311 - exponent])  # x 10**(11 - e)
    for wrong, step in ((mantissa >= 1e12, 1), ((mantissa < 1e11) & nonzero, -1)):
        if wrong.any():  # log10 rounded across a power of ten, or the mantissa rounded up to 10
            exponent[wrong] += step
            mantissa[wrong] = np.rint(magnitude[wrong] * _POWERS[311 - exponent[wrong]])
    out = np.empty((x.size, _NR3_WIDTH), dtype=np.uint8)
    out[:, 0] = np.where(np.signbit(x), ord("-"), ord("+"))
    out[:, 2] = ord(".")
    for index, group in enumerate(_thousands(mantissa)):
        for place in range(3):
            out[:, _MANTISSA_COLUMNS[3 * index + place]] = _DIGIT_PLACES[place].take(group)
    out[:, 14] = ord("e")
    out[:, 15] = np.where(exponent < 0, ord("-"), ord("+"))
    power = np.abs(exponent)
    for place in range(3):
        out[:, 16 + place] = _DIGIT_PLACES[place].take(power)
    out[:, 19] = ord(",")
    return out.reshape(-1)[:-1].tobytes()


def _thousands(whole: np.ndarray) -> list[np.ndarray]:
    """Whole numbers below 10**12 (as floats) in four groups of three digits, highest first.
    Float division by a power of ten is correctly rounded, so its floor is exact: a quotient
    that is not whole is at least 1e-9 from the next whole number."""
    groups = []
    for unit in (1e9, 1e6, 1e3):
        group = np.floor(whole / unit)
        whole = whole - group * unit
        groups.append(group.astype(np.intp))
    return [*groups, whole.astype(np.intp)]


class AnalyzerScpiFront(ScpiFront):
    """Command handlers binding SCPI headers to a :class:`SimulatedAnalyzer`."""

    def __init__(self, analyzer: SimulatedAnalyzer, faults: FaultPlan | None = None) -> None:
        self.analyzer = analyzer
        self.data_format = "ASCII"
        self.byte_order = "big"
        super().__init__(analyzer.settings.identity, faults)
        self._register()

    def _register(self) -> None:
        add = self.dispatcher.add
        a = self.analyzer
        add("[SENSe]:FREQuency:STARt", lambda args, sfx: self._set_frequency("start_hz", args))
        add("[SENSe]:FREQuency:STARt?", lambda args, sfx: f"{a.start_hz:.12g}")
        add("[SENSe]:FREQuency:STOP", lambda args, sfx: self._set_frequency("stop_hz", args))
        add("[SENSe]:FREQuency:STOP?", lambda args, sfx: f"{a.stop_hz:.12g}")
        add("[SENSe]:SWEep:POINts", lambda args, sfx: self._set_points(args))
        add("[SENSe]:SWEep:POINts?", lambda args, sfx: str(a.points))
        add("[SENSe]:BANDwidth[:RESolution]", lambda args, sfx: self._set_if_bandwidth(args))
        add("[SENSe]:BANDwidth[:RESolution]?", lambda args, sfx: f"{a.if_bandwidth_hz:.12g}")
        add("[SENSe]:FUNCtion", lambda args, sfx: self._set_function(args))
        add("[SENSe]:FUNCtion?", lambda args, sfx: f'"XFRequency:{a.parameter}"')
        add("[SENSe]:FREQuency:DATA?", lambda args, sfx: self._encode(a.frequencies(), complex_data=False))
        add("SOURce:POWer[:LEVel][:IMMediate][:AMPLitude]", lambda args, sfx: self._set_power(args))
        add("SOURce:POWer[:LEVel][:IMMediate][:AMPLitude]?", lambda args, sfx: f"{a.power_dbm:.2f}")
        add("INITiate:CONTinuous", lambda args, sfx: None)
        add("INITiate[:IMMediate]", lambda args, sfx: self._trigger())
        add("FORMat[:DATA]", lambda args, sfx: self._set_format(args))
        add("FORMat[:DATA]?", lambda args, sfx: self.data_format)
        add("FORMat:BORDer", lambda args, sfx: self._set_byte_order(args))
        add("TRACe[:DATA]?", lambda args, sfx: self._trace(args))
        add("[SENSe]:SWEep:TIME?", lambda args, sfx: f"{a.sweep_duration_s():.6g}")
        add("SYSTem:TEMPerature?", lambda args, sfx: f"{a.environment.now().temperature_c:.3f}")

    def reset(self) -> None:
        self.analyzer.reset()
        self.data_format = "ASCII"
        self.byte_order = "big"

    def wait_idle(self) -> None:
        self.analyzer.wait_idle()

    def idle(self) -> bool:
        return self.analyzer.idle()

    # -- handlers ---------------------------------------------------------------------------

    def _trigger(self) -> None:
        try:
            self.analyzer.sweep()
        except ValueError as exc:  # e.g. a Touchstone object asked outside its file's range
            raise ScpiCommandError(-221, "Settings conflict") from exc

    def _set_frequency(self, attribute: str, args: str) -> None:
        value = parse_number(args)
        s = self.analyzer.settings
        if not s.frequency_min_hz <= value <= s.frequency_max_hz:
            raise ScpiCommandError(-222, "Data out of range")
        with self.analyzer.lock:
            setattr(self.analyzer, attribute, value)

    def _set_points(self, args: str) -> None:
        value = parse_number(args)
        if value != int(value) or not 1 <= value <= self.analyzer.settings.max_points:
            raise ScpiCommandError(-222, "Data out of range")
        with self.analyzer.lock:
            self.analyzer.points = int(value)

    def _set_if_bandwidth(self, args: str) -> None:
        value = parse_number(args)
        if not 1.0 <= value <= 1e6:
            raise ScpiCommandError(-222, "Data out of range")
        with self.analyzer.lock:
            self.analyzer.if_bandwidth_hz = value

    def _set_power(self, args: str) -> None:
        value = parse_number(args)
        if not -60 <= value <= 20:
            raise ScpiCommandError(-222, "Data out of range")
        with self.analyzer.lock:
            self.analyzer.power_dbm = value

    def _set_function(self, args: str) -> None:
        match = re.fullmatch(r"XFR(?:EQUENCY)?:(S\d\d)", unquote(args), re.IGNORECASE)
        if not match:
            raise ScpiCommandError(-224, "Illegal parameter value")
        parameter = match.group(1).upper()
        if parameter not in self.analyzer.settings.parameters:
            raise ScpiCommandError(-224, "Illegal parameter value")
        with self.analyzer.lock:
            self.analyzer.parameter = parameter

    def _set_format(self, args: str) -> None:
        text = args.replace(" ", "").upper()
        if text in ("REAL,64", "REAL,32"):
            self.data_format = text
        elif text in ("ASC", "ASCII", "ASCII,0", "ASC,0"):
            self.data_format = "ASCII"
        else:
            raise ScpiCommandError(-224, "Illegal parameter value")

    def _set_byte_order(self, args: str) -> None:
        text = args.strip().upper()
        if text in ("NORM", "NORMAL"):
            self.byte_order = "big"
        elif text in ("SWAP", "SWAPPED"):
            self.byte_order = "little"
        else:
            raise ScpiCommandError(-224, "Illegal parameter value")

    def _trace(self, args: str) -> DataReply:
        name = args.strip().upper()
        if name not in ("RAW", "CORR", "CORRECTED"):
            raise ScpiCommandError(-224, "Illegal parameter value")
        a = self.analyzer
        a.wait_idle()
        with a.lock:
            if name == "RAW":
                trace = a.traces.get(a.parameter)
            elif not a.settings.internal_correction:
                raise ScpiCommandError(-224, "Illegal parameter value")
            else:
                trace = a.corrected_trace(a.parameter)
        if trace is None:
            raise ScpiCommandError(-230, "Data corrupt or stale")
        return self._encode(trace, complex_data=True)

    def _encode(self, values: np.ndarray, complex_data: bool) -> DataReply:
        # complex128 is stored as (re, im) pairs: viewed as float64 it is already the
        # interleaved list the trace formats want, without a copy.
        if complex_data:
            flat = np.ascontiguousarray(values, dtype=np.complex128).view(np.float64)
        else:
            flat = np.asarray(values, dtype=np.float64)
        if self.data_format == "ASCII":
            return DataReply(ascii_numbers(flat))
        dtype = (">" if self.byte_order == "big" else "<") + ("f8" if self.data_format == "REAL,64" else "f4")
        payload = flat.astype(dtype, copy=False).tobytes()
        return DataReply(*_block_header(len(payload)), payload)
